/**
 * What the SQL backends (SQLite, PostgreSQL) share: the column shapes of their tables, the mapping
 * of a row to its record, and the checks and texts both must give alike so that the same contract
 * suite passes on each. JSON columns are kept as text in both, so a record reads back as written.
 */
import { TrueshiftError } from '@trueshift/errors';
import type {
  AlertChange,
  AlertKind,
  AlertRecord,
  AlertState,
  AnalyserStateRecord,
  BetterDirection,
  Direction,
  EvidenceSnapshot,
  MarkInput,
  MarkRecord,
  MarkRevision,
  OutboxChannel,
  OutboxInput,
  OutboxRecord,
  OutboxState,
  QuarantineEntry,
  SampleInput,
  TagInput,
  TagRecord,
  TagSettings,
  TokenRecord,
  TokenScope,
} from './types.js';

export interface TagRow {
  id: number;
  name: string;
  unit: string | null;
  description: string | null;
  better: string;
  valid_min: number | null;
  valid_max: number | null;
  settings: string;
  created_at: number;
  updated_at: number;
}

/** A mark's own columns; each backend gathers its tags in its own way. */
export interface MarkColumns {
  id: string;
  at: number;
  label: string;
  note: string;
  direction: string;
  smallest_shift: number | null;
  n_before: number | null;
  n_after_cap: number | null;
  risk_level: number | null;
  settling_ms: number | null;
  created_at: number;
  updated_at: number;
  withdrawn_at: number | null;
  revision: number;
}

export interface MarkRevisionRow {
  mark_id: string;
  revision: number;
  changed_at: number;
  changed_by: string;
  action: string;
  reason: string;
  mark: string;
}

export interface EvidenceRow {
  id: number;
  mark_id: string;
  tag: string;
  sample_time: number;
  evaluated_at: number;
  n_after: number;
  risk: number | null;
  verdict: string;
  body: string;
}

export interface AlertRow {
  id: number;
  tag: string;
  mark_id: string | null;
  kind: string;
  dedupe_key: string;
  title: string;
  state: string;
  opened_at: number;
  updated_at: number;
  repeats: number;
  acknowledged_at: number | null;
  acknowledged_by: string | null;
  note: string | null;
  cleared_at: number | null;
  evidence: string;
}

export interface OutboxRow {
  id: number;
  channel: string;
  target: string;
  idempotency_key: string;
  payload: string;
  created_at: number;
  state: string;
  attempts: number;
  next_attempt_at: number;
  last_error: string | null;
  delivered_at: number | null;
}

export interface TokenRow {
  id: string;
  name: string;
  hash: string;
  scopes: string;
  created_at: number;
  revoked_at: number | null;
}

export interface AnalyserStateRow {
  key: string;
  state: string;
  last_seq: number;
  updated_at: number;
}

export function parseJson(text: string): unknown {
  return JSON.parse(text) as unknown;
}

/** JSON text for a column that must hold something: `undefined` becomes null. */
export function toJson(value: unknown): string {
  return JSON.stringify(value ?? null);
}

/** A patch value when one was given; null is a value (it clears the field). */
export function pick<T>(given: T | undefined, current: T): T {
  return given === undefined ? current : given;
}

export function describeTime(t: number): string {
  // Date covers ±8.64e15 ms; outside that a time is shown as the bare number.
  return Math.abs(t) <= 8.64e15 ? `${t} (${new Date(t).toISOString()})` : String(t);
}

export function describeValue(value: number | null, quality: number): string {
  return `${value === null ? 'no value' : String(value)} (quality ${quality})`;
}

/** Why a sample was quarantined: its (tag, time) is stored with another value or quality. */
export function conflictReason(
  sample: SampleInput,
  storedValue: number | null,
  storedQuality: number,
): string {
  return (
    `Tag ${sample.tag} at ${describeTime(sample.t)} already has ` +
    `${describeValue(storedValue, storedQuality)}; the new ${describeValue(sample.value, sample.quality)} ` +
    'was not stored.'
  );
}

/**
 * Refuses a sample the store cannot keep as given. `wholeMilliseconds`: the backend keeps times as
 * 64-bit integers (PostgreSQL bigint), so a time must be a safe whole number.
 */
export function checkSample(sample: SampleInput, index: number, wholeMilliseconds = false): void {
  let problem: string | null = null;
  if (sample.tag.length === 0) problem = 'the tag name is empty';
  else if (!Number.isFinite(sample.t)) problem = `the time ${sample.t} is not a finite number`;
  else if (wholeMilliseconds && !Number.isSafeInteger(sample.t)) {
    problem = `the time ${sample.t} is not a whole number of milliseconds within ±2^53`;
  } else if (sample.value !== null && !Number.isFinite(sample.value)) {
    problem = `the value ${sample.value} is not a finite number (null means no value)`;
  } else if ((sample.quality | 0) !== sample.quality) {
    problem = `the quality ${sample.quality} is not a 32-bit whole number`;
  }
  if (problem !== null) {
    throw new TrueshiftError('INVALID_ARGUMENT', `Sample ${index} of the batch: ${problem}.`);
  }
}

export function checkMarkTags(tags: readonly string[]): void {
  if (tags.length === 0 || tags.some((tag) => tag.length === 0)) {
    throw new TrueshiftError('INVALID_ARGUMENT', 'A mark needs at least one tag, each named.');
  }
  if (new Set(tags).size !== tags.length) {
    throw new TrueshiftError('INVALID_ARGUMENT', 'A mark names each tag once.');
  }
}

export function tagFromRow(row: TagRow): TagRecord {
  return {
    name: row.name,
    unit: row.unit,
    description: row.description,
    better: row.better as BetterDirection,
    validMin: row.valid_min,
    validMax: row.valid_max,
    settings: parseJson(row.settings) as TagSettings,
    createdAt: row.created_at,
    updatedAt: row.updated_at,
  };
}

export function markFromRow(row: MarkColumns, tags: string[]): MarkRecord {
  return {
    id: row.id,
    tags,
    at: row.at,
    label: row.label,
    note: row.note,
    direction: row.direction as Direction,
    smallestShift: row.smallest_shift,
    nBefore: row.n_before,
    nAfterCap: row.n_after_cap,
    riskLevel: row.risk_level,
    settlingMs: row.settling_ms,
    createdAt: row.created_at,
    updatedAt: row.updated_at,
    withdrawnAt: row.withdrawn_at,
    revision: row.revision,
  };
}

export function evidenceFromRow(row: EvidenceRow): EvidenceSnapshot {
  return {
    id: row.id,
    markId: row.mark_id,
    tag: row.tag,
    sampleTime: row.sample_time,
    evaluatedAt: row.evaluated_at,
    nAfter: row.n_after,
    risk: row.risk,
    verdict: row.verdict,
    body: parseJson(row.body),
  };
}

export function alertFromRow(row: AlertRow): AlertRecord {
  return {
    id: row.id,
    tag: row.tag,
    markId: row.mark_id,
    kind: row.kind as AlertKind,
    dedupeKey: row.dedupe_key,
    title: row.title,
    state: row.state as AlertState,
    openedAt: row.opened_at,
    updatedAt: row.updated_at,
    repeats: row.repeats,
    acknowledgedAt: row.acknowledged_at,
    acknowledgedBy: row.acknowledged_by,
    note: row.note,
    clearedAt: row.cleared_at,
    evidence: parseJson(row.evidence),
  };
}

export function outboxFromRow(row: OutboxRow): OutboxRecord {
  return {
    id: row.id,
    channel: row.channel as OutboxChannel,
    target: row.target,
    idempotencyKey: row.idempotency_key,
    payload: parseJson(row.payload),
    createdAt: row.created_at,
    state: row.state as OutboxState,
    attempts: row.attempts,
    nextAttemptAt: row.next_attempt_at,
    lastError: row.last_error,
    deliveredAt: row.delivered_at,
  };
}

export function tokenFromRow(row: TokenRow): TokenRecord {
  return {
    id: row.id,
    name: row.name,
    hash: row.hash,
    scopes: parseJson(row.scopes) as TokenScope[],
    createdAt: row.created_at,
    revokedAt: row.revoked_at,
  };
}

export function analyserStateFromRow(row: AnalyserStateRow): AnalyserStateRecord {
  return {
    key: row.key,
    state: parseJson(row.state),
    lastSeq: row.last_seq,
    updatedAt: row.updated_at,
  };
}

/** Raw payloads and error texts kept by a store are cut to this many UTF-8 bytes. */
export const TEXT_LIMIT_BYTES = 64 * 1024;

const utf8 = new TextEncoder();
const fromUtf8 = new TextDecoder();

/**
 * Cuts `text` to at most `maxBytes` of UTF-8 without splitting a character, so a quarantined
 * megabyte payload cannot bloat the store while its start stays readable.
 */
export function cutUtf8(text: string, maxBytes: number = TEXT_LIMIT_BYTES): string {
  // A UTF-16 code unit never needs more than 3 bytes of UTF-8, so short texts skip the encoding.
  if (text.length * 3 <= maxBytes) return text;
  const bytes = utf8.encode(text);
  if (bytes.length <= maxBytes) return text;
  let end = maxBytes;
  // Step back over continuation bytes (10xxxxxx) to the first byte of the character that straddles.
  while (end > 0 && ((bytes[end] ?? 0) & 0xc0) === 0x80) end--;
  return fromUtf8.decode(bytes.subarray(0, end));
}

/** A new mark as every backend stores it: revision 1, defaults filled in. */
export function newMarkRecord(mark: MarkInput, id: string, now: number): MarkRecord {
  return {
    id,
    tags: [...mark.tags],
    at: mark.at,
    label: mark.label,
    note: mark.note ?? '',
    direction: mark.direction,
    smallestShift: mark.smallestShift ?? null,
    nBefore: mark.nBefore ?? null,
    nAfterCap: mark.nAfterCap ?? null,
    riskLevel: mark.riskLevel ?? null,
    settlingMs: mark.settlingMs ?? null,
    createdAt: now,
    updatedAt: now,
    withdrawnAt: null,
    revision: 1,
  };
}

/** A mark after a correction: the fields the patch gives, the next revision. */
export function correctedMarkRecord(
  current: MarkRecord,
  patch: Partial<MarkInput>,
  now: number,
): MarkRecord {
  return {
    ...current,
    tags: patch.tags === undefined ? current.tags : [...patch.tags],
    at: patch.at ?? current.at,
    label: patch.label ?? current.label,
    note: patch.note ?? current.note,
    direction: patch.direction ?? current.direction,
    smallestShift: pick(patch.smallestShift, current.smallestShift),
    nBefore: pick(patch.nBefore, current.nBefore),
    nAfterCap: pick(patch.nAfterCap, current.nAfterCap),
    riskLevel: pick(patch.riskLevel, current.riskLevel),
    settlingMs: pick(patch.settlingMs, current.settlingMs),
    updatedAt: now,
    revision: current.revision + 1,
  };
}

/**
 * The outbox entries that announce an alert change to each target. The idempotency key names the
 * alert, the change and its repeat count, so a change queued twice (a replay) is one delivery.
 */
export function announcements(
  change: AlertChange,
  targets: readonly Omit<OutboxInput, 'payload' | 'idempotencyKey'>[],
): OutboxInput[] {
  const { alert } = change;
  return targets.map((target) => ({
    channel: target.channel,
    target: target.target,
    createdAt: target.createdAt,
    idempotencyKey: `alert:${alert.id}:${change.change}:${alert.repeats}`,
    payload: { change: change.change, alert },
  }));
}

/** A row limit as given, checked: a whole number >= 0, or undefined for no limit. */
export function checkLimit(limit: number | undefined, what: string): number | undefined {
  if (limit !== undefined && (!Number.isSafeInteger(limit) || limit < 0)) {
    throw new TrueshiftError('INVALID_ARGUMENT', `${what}: limit must be a whole number >= 0.`);
  }
  return limit;
}

export function checkTagNames(names: readonly string[]): void {
  if (names.some((name) => name.length === 0)) {
    throw new TrueshiftError('INVALID_ARGUMENT', 'A tag needs a name.');
  }
}

/** A tag after an upsert: the fields given, the stored ones for the rest, its first createdAt. */
export function upsertedTagRecord(
  tag: TagInput,
  existing: TagRecord | undefined,
  now: number,
): TagRecord {
  return {
    name: tag.name,
    unit: pick(tag.unit, existing?.unit ?? null),
    description: pick(tag.description, existing?.description ?? null),
    better: tag.better ?? existing?.better ?? 'either',
    validMin: pick(tag.validMin, existing?.validMin ?? null),
    validMax: pick(tag.validMax, existing?.validMax ?? null),
    settings: tag.settings ?? existing?.settings ?? {},
    createdAt: existing?.createdAt ?? now,
    updatedAt: now,
  };
}

/** The mark looked up by `id`, which must exist. */
export function existingMark(mark: MarkRecord | undefined, id: string): MarkRecord {
  if (mark === undefined) throw new TrueshiftError('MARK_NOT_FOUND', `Mark ${id}.`);
  return mark;
}

/** The mark a correction or withdrawal may change: it exists and is not withdrawn. */
export function changeableMark(found: MarkRecord | undefined, id: string): MarkRecord {
  const mark = existingMark(found, id);
  if (mark.withdrawnAt !== null) {
    throw new TrueshiftError(
      'MARK_WITHDRAWN',
      `Mark ${id} was withdrawn at ${describeTime(mark.withdrawnAt)}.`,
    );
  }
  return mark;
}

/** The alert an acknowledgement or clearing may change: it is not cleared. */
export function changeableAlert(alert: AlertRecord): AlertRecord {
  if (alert.state === 'cleared') {
    throw new TrueshiftError(
      'ALERT_CLEARED',
      `Alert ${alert.id} was cleared at ${describeTime(alert.clearedAt ?? alert.updatedAt)}.`,
    );
  }
  return alert;
}

export function markRevisionFromRow(row: MarkRevisionRow): MarkRevision {
  return {
    markId: row.mark_id,
    revision: row.revision,
    changedAt: row.changed_at,
    changedBy: row.changed_by,
    action: row.action as MarkRevision['action'],
    reason: row.reason,
    mark: parseJson(row.mark) as MarkRecord,
  };
}

/** A quarantine entry's columns but its raw input, which each backend keeps in its own type. */
export interface QuarantineColumns {
  id: number;
  source: string;
  reason: string;
  code: string;
  tag: string | null;
  received_at: number;
}

export function quarantineFromRow(row: QuarantineColumns, raw: string): QuarantineEntry {
  return {
    id: row.id,
    source: row.source,
    raw,
    reason: row.reason,
    code: row.code as QuarantineEntry['code'],
    tag: row.tag,
    receivedAt: row.received_at,
  };
}

/** One numbered step of a SQL backend's schema. */
export interface Migration {
  version: number;
  name: string;
  sql: string;
}

/**
 * The steps a schema at version `current` still needs, in order. A schema newer than every step
 * known (written by a newer build) is refused rather than used half-understood.
 */
export function pendingMigrations(
  steps: readonly Migration[],
  current: number,
  what: string,
): Migration[] {
  const newest = steps.reduce((max, step) => Math.max(max, step.version), 0);
  if (current > newest) {
    throw new TrueshiftError(
      'INTERNAL',
      `${what} has schema version ${current}; this build knows up to ${newest}. Use a newer trueshift.`,
    );
  }
  return steps.filter((step) => step.version > current).sort((a, b) => a.version - b.version);
}
