import type { ErrorCode } from '@trueshift/errors';

/** OPC-style quality codes (OPC DA): 192 good, 0 bad; anything below 192 is not used in analysis. */
export const QUALITY_GOOD = 192;
export const QUALITY_BAD = 0;
/** Sparkplug B's stale quality. */
export const QUALITY_STALE = 500;

export type BetterDirection = 'higher' | 'lower' | 'either';
export type Direction = 'rise' | 'fall' | 'either';

/** How a tag is analysed: one value per batch, or per-period means of a continuous signal. */
export type TagKind = 'batch' | 'continuous';

/** Per-tag analysis settings; anything left out takes the service's default. */
export interface TagSettings {
  kind?: TagKind;
  /** Length of the averaging period for continuous tags, in milliseconds. */
  periodMs?: number;
  riskLevel?: number;
  nBefore?: number;
  nAfterCap?: number;
  smallestShift?: number;
  /** Target in-control ARL used to choose CUSUM h and EWMA L. */
  inControlArl?: number;
  cusumK?: number;
  ewmaLambda?: number;
  /** Consecutive evaluations across the risk level before an alert opens. */
  alertAfter?: number;
  /** A tag is stale after this many of its usual sampling intervals without a sample. */
  staleAfterIntervals?: number;
}

export interface TagInput {
  name: string;
  unit?: string | null;
  description?: string | null;
  better?: BetterDirection;
  validMin?: number | null;
  validMax?: number | null;
  settings?: TagSettings;
}

export interface TagRecord {
  name: string;
  unit: string | null;
  description: string | null;
  better: BetterDirection;
  validMin: number | null;
  validMax: number | null;
  settings: TagSettings;
  createdAt: number;
  updatedAt: number;
}

/** A sample as it arrives. Times are epoch milliseconds. */
export interface SampleInput {
  tag: string;
  t: number;
  /** null: the source said explicitly that there is no value. */
  value: number | null;
  quality: number;
  /** Where it came from, e.g. "mqtt:plant/evap1/steam", "csv:history.csv:17", "http". */
  source: string;
  receivedAt: number;
}

export interface StoredSample {
  /** Insertion order across all tags, so followers can resume after the last one they saw. */
  seq: number;
  tag: string;
  t: number;
  value: number | null;
  quality: number;
}

/** One tag's samples in time order, in columns: a history of 10^6 samples reads as three arrays. */
export interface SampleColumns {
  t: Float64Array;
  /** NaN where the sample has no value. */
  value: Float64Array;
  quality: Int32Array;
}

export interface SampleReadOptions {
  /** Inclusive lower time bound (epoch ms). */
  from?: number;
  /** Exclusive upper time bound (epoch ms). */
  to?: number;
  /** Only samples with quality >= 192 and a value. */
  goodOnly?: boolean;
  /** The latest `limit` samples inside the bounds (still returned oldest first). */
  limit?: number;
}

export interface SampleWriteResult {
  inserted: number;
  /** Replays of a stored (tag, time, value): nothing to do. */
  duplicates: number;
  /** A different value for a stored (tag, time): quarantined, the stored one kept. */
  conflicts: number;
}

export interface QuarantineInput {
  source: string;
  /** The raw input as received (a payload, a CSV line), cut to a bounded length by the store. */
  raw: string;
  reason: string;
  code: ErrorCode;
  tag?: string | null;
  receivedAt: number;
}

export interface QuarantineEntry extends QuarantineInput {
  id: number;
  tag: string | null;
}

export interface MarkInput {
  tags: string[];
  /** The moment the change went live (epoch ms); may lie in the past. */
  at: number;
  label: string;
  note?: string;
  direction: Direction;
  smallestShift?: number | null;
  nBefore?: number | null;
  nAfterCap?: number | null;
  riskLevel?: number | null;
  /** Samples within this time after the mark are settling, left out of later marks' history. */
  settlingMs?: number | null;
}

export interface MarkRecord {
  id: string;
  tags: string[];
  at: number;
  label: string;
  note: string;
  direction: Direction;
  smallestShift: number | null;
  nBefore: number | null;
  nAfterCap: number | null;
  riskLevel: number | null;
  settlingMs: number | null;
  createdAt: number;
  updatedAt: number;
  withdrawnAt: number | null;
  /** Starts at 1 and counts every correction and the withdrawal. */
  revision: number;
}

export interface MarkRevision {
  markId: string;
  revision: number;
  changedAt: number;
  changedBy: string;
  /** What was done: created, corrected or withdrawn. */
  action: 'created' | 'corrected' | 'withdrawn';
  reason: string;
  /** The mark as it stood after this revision. */
  mark: MarkRecord;
}

export interface EvidenceSnapshotInput {
  markId: string;
  tag: string;
  /** Time of the last sample the evidence includes. */
  sampleTime: number;
  evaluatedAt: number;
  nAfter: number;
  /** Reference risk in the mark's direction; null when there is not enough history. */
  risk: number | null;
  verdict: string;
  /** The full evidence, as JSON. */
  body: unknown;
}

export interface EvidenceSnapshot extends EvidenceSnapshotInput {
  id: number;
}

export type AlertKind = 'credible-shift' | 'unmarked-shift' | 'stale' | 'stuck' | 'out-of-range';
export type AlertState = 'open' | 'acknowledged' | 'cleared';

export interface AlertInput {
  tag: string;
  markId: string | null;
  kind: AlertKind;
  /** Repeats with the same key while an alert is not cleared update it instead of opening another. */
  dedupeKey: string;
  title: string;
  at: number;
  evidence: unknown;
}

export interface AlertRecord {
  id: number;
  tag: string;
  markId: string | null;
  kind: AlertKind;
  dedupeKey: string;
  title: string;
  state: AlertState;
  openedAt: number;
  updatedAt: number;
  /** How many times the condition was seen again while the alert stayed open. */
  repeats: number;
  acknowledgedAt: number | null;
  acknowledgedBy: string | null;
  /** The latest note: the acknowledgement's, or the clearing's when it gave one. */
  note: string | null;
  clearedAt: number | null;
  evidence: unknown;
}

export type OutboxChannel = 'webhook' | 'mqtt';
export type OutboxState = 'pending' | 'delivered' | 'dead';

export interface OutboxInput {
  channel: OutboxChannel;
  /** A webhook URL or an MQTT topic. */
  target: string;
  /** Stable across retries, so receivers can drop duplicates. */
  idempotencyKey: string;
  payload: unknown;
  createdAt: number;
}

export interface OutboxRecord extends OutboxInput {
  id: number;
  state: OutboxState;
  attempts: number;
  nextAttemptAt: number;
  lastError: string | null;
  deliveredAt: number | null;
}

/** The change an alert operation made, so the caller can publish it on the event stream. */
export interface AlertChange {
  alert: AlertRecord;
  change: 'opened' | 'repeated' | 'acknowledged' | 'cleared';
}

export interface AnalyserStateRecord {
  /** e.g. a tag name, or "mark:<id>:<tag>". */
  key: string;
  state: unknown;
  /** The last sample seq folded into this state: reprocessing up to it must not double-count. */
  lastSeq: number;
  updatedAt: number;
}

/** What an API token lets its holder do: admin covers write, write covers read. */
export type TokenScope = 'read' | 'write' | 'admin';

export interface TokenInput {
  id: string;
  /** Who or what holds it, for people reading the list; need not be unique. */
  name: string;
  /** Hex SHA-256 of the secret: the secret itself is never stored. */
  hash: string;
  scopes: TokenScope[];
  createdAt: number;
}

export interface TokenRecord extends TokenInput {
  revokedAt: number | null;
}

export interface FileRecord {
  hash: string;
  name: string;
  takenAt: number;
  summary: unknown;
}

/**
 * Everything trueshift keeps. Methods are async so a networked backend (PostgreSQL) can implement the
 * same contract; the SQLite backend answers from one writer connection.
 */
export interface Store {
  close(): Promise<void>;

  /**
   * How many shards the tags are spread over (by `shardOf` their name), fixed when the store is
   * created. A follower of one shard sees only its tags' samples, in commit order. 1 for a store
   * that only one process uses.
   */
  readonly shards: number;

  upsertTag(tag: TagInput, now: number): Promise<TagRecord>;
  /** Creates tags that do not exist yet with default settings; existing tags are left alone. */
  ensureTags(names: readonly string[], now: number): Promise<void>;
  getTag(name: string): Promise<TagRecord | null>;
  listTags(): Promise<TagRecord[]>;

  /** One transaction: inserts new samples, skips replays, quarantines conflicting values. */
  writeSamples(samples: readonly SampleInput[]): Promise<SampleWriteResult>;
  readSamples(tag: string, options?: SampleReadOptions): Promise<SampleColumns>;
  countSamples(tag?: string): Promise<number>;
  /**
   * Samples stored after `afterSeq`, in insertion order, at most `limit`; with `shard`, only the
   * samples of that shard's tags. Within a shard, a sample with a higher seq was committed later,
   * so a follower that resumes after the last seq it saw misses nothing.
   */
  samplesAfter(afterSeq: number, limit: number, shard?: number): Promise<StoredSample[]>;
  lastSeq(): Promise<number>;

  quarantine(entries: readonly QuarantineInput[]): Promise<void>;
  listQuarantine(options?: {
    limit?: number;
    beforeId?: number;
    source?: string;
  }): Promise<QuarantineEntry[]>;
  countQuarantine(): Promise<number>;

  createMark(mark: MarkInput, by: string, now: number): Promise<MarkRecord>;
  correctMark(
    id: string,
    patch: Partial<MarkInput>,
    by: string,
    reason: string,
    now: number,
  ): Promise<MarkRecord>;
  withdrawMark(id: string, by: string, reason: string, now: number): Promise<MarkRecord>;
  getMark(id: string): Promise<MarkRecord | null>;
  listMarks(options?: { tag?: string; includeWithdrawn?: boolean }): Promise<MarkRecord[]>;
  markHistory(id: string): Promise<MarkRevision[]>;

  addEvidenceSnapshot(snapshot: EvidenceSnapshotInput): Promise<EvidenceSnapshot>;
  listEvidenceSnapshots(
    markId: string,
    tag: string,
    options?: { limit?: number },
  ): Promise<EvidenceSnapshot[]>;
  latestEvidence(markId: string, tag: string): Promise<EvidenceSnapshot | null>;

  /** Opens an alert, or counts a repeat of an uncleared one with the same dedupe key; queues the outbox entries in the same transaction. */
  raiseAlert(
    alert: AlertInput,
    outbox: readonly Omit<OutboxInput, 'payload' | 'idempotencyKey'>[],
  ): Promise<AlertChange>;
  acknowledgeAlert(
    id: number,
    by: string,
    note: string,
    now: number,
    outbox: readonly Omit<OutboxInput, 'payload' | 'idempotencyKey'>[],
  ): Promise<AlertChange>;
  /** Clears an alert; a note, when given, becomes the alert's note (why it was cleared). */
  clearAlert(
    id: number,
    now: number,
    outbox: readonly Omit<OutboxInput, 'payload' | 'idempotencyKey'>[],
    note?: string,
  ): Promise<AlertChange>;
  getAlert(id: number): Promise<AlertRecord | null>;
  listAlerts(options?: {
    state?: AlertState;
    tag?: string;
    limit?: number;
  }): Promise<AlertRecord[]>;

  enqueueOutbox(entries: readonly OutboxInput[]): Promise<void>;
  /** Pending entries due at `now`, oldest first. */
  dueOutbox(now: number, limit: number): Promise<OutboxRecord[]>;
  markDelivered(id: number, now: number): Promise<void>;
  markAttemptFailed(id: number, error: string, nextAttemptAt: number, dead: boolean): Promise<void>;
  listOutbox(options?: { state?: OutboxState; limit?: number }): Promise<OutboxRecord[]>;

  /**
   * Saves the records in one transaction. With a fence, only while that lease is still held at
   * that epoch: otherwise nothing is saved and LEASE_LOST is thrown (a store without leases
   * refuses every fence).
   */
  saveAnalyserState(records: readonly AnalyserStateRecord[], fence?: LeaseFence): Promise<void>;
  loadAnalyserState(key: string): Promise<AnalyserStateRecord | null>;
  listAnalyserState(prefix?: string): Promise<AnalyserStateRecord[]>;

  /** Records a file by content hash; false when that content was taken before. */
  recordFile(file: FileRecord): Promise<boolean>;

  /** Outbox entries in each state. */
  countOutbox(): Promise<Record<OutboxState, number>>;

  createToken(token: TokenInput): Promise<TokenRecord>;
  /** The token with this hash, revoked or not; null when there is none. */
  findTokenByHash(hash: string): Promise<TokenRecord | null>;
  /** Every token, revoked ones included, oldest first. */
  listTokens(): Promise<TokenRecord[]>;
  /** Revokes the token; revoking it again keeps the first time. Throws TOKEN_NOT_FOUND. */
  revokeToken(id: string, now: number): Promise<TokenRecord>;
}

/** Proof that a writer holds a shard: the lease's owner and the epoch it was taken at. */
export interface LeaseFence {
  shard: number;
  owner: string;
  epoch: number;
}

export interface Lease extends LeaseFence {
  /** Epoch ms after which another instance may take the shard. */
  expiresAt: number;
}

/**
 * What one instance tells the others through the store (PostgreSQL LISTEN/NOTIFY). Sent in the
 * transaction of the change itself, so a message goes out exactly when the change is committed.
 */
export type ClusterMessage =
  | { kind: 'samples'; shards: number[] }
  | {
      kind: 'alert';
      origin: string;
      alertId: number;
      change: AlertChange['change'];
    }
  | { kind: 'evidence'; origin: string; snapshotId: number }
  | { kind: 'mark'; origin: string; markId: string; change: 'created' | 'corrected' | 'withdrawn' };

/**
 * A store several instances share: it keeps who is alive, who analyses which shard, and carries
 * messages between instances. Times are epoch ms from the instances' clocks, which must agree to
 * well within a lease's length (NTP).
 */
export interface ClusterStore extends Store {
  /** The instance this connection speaks for: the `origin` of the messages it sends. */
  readonly instance: string;
  /** Records that this instance is alive until `until`; returns every instance alive at `now`. */
  heartbeat(now: number, until: number): Promise<string[]>;
  /** Extends this instance's unexpired leases to `until`; returns the leases it still holds. */
  renewLeases(now: number, until: number): Promise<Lease[]>;
  /** Takes at most `count` free or expired shards; each take raises that shard's epoch. */
  claimLeases(count: number, now: number, until: number): Promise<Lease[]>;
  /** Gives a shard back at once, once its analyser has saved its state. */
  releaseLease(shard: number): Promise<void>;
  listLeases(): Promise<Lease[]>;
  getEvidenceSnapshot(id: number): Promise<EvidenceSnapshot | null>;
  /**
   * Calls `listener` with every message any instance sends, its own included, from now on;
   * `onGap` after the listening connection was lost and came back (messages may be missing).
   */
  listen(
    listener: (message: ClusterMessage) => void,
    onGap?: () => void,
  ): Promise<() => Promise<void>>;
}
