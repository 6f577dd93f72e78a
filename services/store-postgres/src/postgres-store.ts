import { randomUUID } from 'node:crypto';
import pg from 'pg';
import { TrueshiftError } from '@trueshift/errors';
import {
  alertFromRow,
  announcements,
  changeableAlert,
  changeableMark,
  checkLimit,
  checkTagNames,
  existingMark,
  upsertedTagRecord,
  analyserStateFromRow,
  checkMarkTags,
  checkSample,
  conflictReason,
  correctedMarkRecord,
  cutUtf8,
  evidenceFromRow,
  markFromRow,
  markRevisionFromRow,
  newMarkRecord,
  outboxFromRow,
  quarantineFromRow,
  QUALITY_GOOD,
  SampleColumnsBuilder,
  shardOf,
  tagFromRow,
  toJson,
  tokenFromRow,
} from '@trueshift/store';
import type {
  AlertRow,
  QuarantineColumns,
  AnalyserStateRow,
  EvidenceRow,
  MarkColumns,
  MarkRevisionRow,
  OutboxRow,
  TagRow as SharedTagRow,
  TokenRow,
  AlertChange,
  AlertInput,
  AlertRecord,
  AlertState,
  AnalyserStateRecord,
  ClusterMessage,
  ClusterStore,
  EvidenceSnapshot,
  EvidenceSnapshotInput,
  FileRecord,
  Lease,
  LeaseFence,
  MarkInput,
  MarkRecord,
  MarkRevision,
  OutboxInput,
  OutboxRecord,
  OutboxState,
  QuarantineEntry,
  QuarantineInput,
  SampleColumns,
  SampleInput,
  SampleReadOptions,
  SampleWriteResult,
  StoredSample,
  TagInput,
  TagRecord,
  TokenInput,
  TokenRecord,
} from '@trueshift/store';
import { ClusterListener } from './listener.js';
import { applyMigrations, lockKey } from './migrations.js';
import { asUnavailable } from './unavailable.js';

export interface PostgresStoreOptions {
  /** A PostgreSQL connection URL, e.g. postgres://trueshift@db.plant.local/trueshift. */
  url: string;
  /** How many shards the tags are spread over; fixed when the schema is created. 1 by default. */
  shards?: number;
  /** Who this instance is, in leases, heartbeats and the messages it sends; random by default. */
  instance?: string;
  /** The schema that holds the tables, created if need be; 'public' by default. */
  schema?: string;
  /** Connections in the pool; 10 by default. */
  poolSize?: number;
}

/** Outbox targets for an alert change: the store adds the payload and the idempotency key. */
type OutboxTarget = Omit<OutboxInput, 'payload' | 'idempotencyKey'>;

/** Samples read per page by readSamples: pages keep garbage young, and few enough round trips. */
const READ_PAGE = 32_768;
/** Stored times are safe integers, so bounds clamped to ±2^53 select exactly the same samples. */
const TIME_LIMIT = 2 ** 53;
const CHANNEL = 'trueshift_cluster';

interface TagRow extends SharedTagRow {
  shard: number;
}

type PageRow = [n: number, t: Buffer | null, value: Buffer | null, quality: Buffer | null];
type StoredSampleRow = [seq: number, tag: string, t: number, value: number | null, quality: number];

interface QuarantineRow extends QuarantineColumns {
  raw: Buffer;
}

/** Its tags gathered into an array by MARK_SELECT. */
interface MarkRow extends MarkColumns {
  tags: string[];
}

interface LeaseRow {
  shard: number;
  owner: string;
  epoch: number;
  expires_at: number;
}

const MARK_SELECT = `
  SELECT m.*,
    ARRAY(SELECT t.name FROM mark_tags mt JOIN tags t ON t.id = mt.tag_id
           WHERE mt.mark_id = m.id ORDER BY mt.position) AS tags
  FROM marks m`;

const INT8_OID = 20;
const int8 = (text: string): number => Number(text);
const builtinParser = pg.types.getTypeParser as (
  oid: number,
  format?: 'text' | 'binary',
) => unknown;

/** int8 as a JS number: epoch ms, seqs and ids stay far below 2^53. */
const TYPES: pg.CustomTypesConfig = {
  getTypeParser: ((oid: number, format?: 'text' | 'binary'): unknown =>
    oid === INT8_OID ? int8 : builtinParser(oid, format)) as typeof pg.types.getTypeParser,
};

/** A limit for SQL: null is LIMIT ALL. */
function limitOf(limit: number | undefined, what: string): number | null {
  return checkLimit(limit, what) ?? null;
}

/** A time bound as the smallest whole millisecond that selects the same stored samples. */
function timeBound(bound: number): number {
  return Math.min(TIME_LIMIT, Math.max(-TIME_LIMIT, Math.ceil(bound)));
}

function leaseFromRow(row: LeaseRow): Lease {
  return { shard: row.shard, owner: row.owner, epoch: row.epoch, expiresAt: row.expires_at };
}

function byShard(a: Lease, b: Lease): number {
  return a.shard - b.shard;
}

/**
 * Appends `n` samples packed as big-endian float8 times, float8 values (NaN: no value) and int4
 * qualities, in time order (descending when asked).
 */
function appendPacked(
  columns: SampleColumnsBuilder,
  n: number,
  t: Buffer,
  value: Buffer,
  quality: Buffer,
  descending: boolean,
): void {
  if (t.length !== 8 * n || value.length !== 8 * n || quality.length !== 4 * n) {
    throw new TrueshiftError('INTERNAL', `A page of ${n} samples came back malformed.`);
  }
  const times = new Float64Array(n);
  for (let i = 0; i < n; i++) times[i] = t.readDoubleBE(8 * i);
  const order = inOrder(times, descending) ? null : sortedIndices(times, descending);
  const at = columns.reserve(n);
  for (let k = 0; k < n; k++) {
    const i = order === null ? k : (order[k] ?? k);
    columns.set(
      at + k,
      times[i] ?? Number.NaN,
      value.readDoubleBE(8 * i),
      quality.readInt32BE(4 * i),
    );
  }
}

/** True when the times are strictly rising (falling when `descending`), as a page should come. */
function inOrder(times: Float64Array, descending: boolean): boolean {
  for (let i = 1; i < times.length; i++) {
    const step = (times[i] ?? 0) - (times[i - 1] ?? 0);
    if (descending ? step >= 0 : step <= 0) return false;
  }
  return true;
}

function sortedIndices(times: Float64Array, descending: boolean): number[] {
  const sign = descending ? -1 : 1;
  return Array.from(times, (_, i) => i).sort((a, b) => sign * ((times[a] ?? 0) - (times[b] ?? 0)));
}

interface KnownTag {
  id: number;
  shard: number;
}

/**
 * The Store on PostgreSQL, shared by several instances. Every change is one transaction; the ones
 * other instances must hear about notify the cluster channel inside it, so the message goes out
 * exactly when the change commits.
 */
export class PostgresStore implements ClusterStore {
  readonly shards: number;
  readonly instance: string;
  /** This process among any that speak under the same instance name. */
  private readonly incarnation = randomUUID();
  readonly schema: string;
  /** The NOTIFY channel: one per schema, so stores in different schemas do not hear each other. */
  readonly channel: string;
  private readonly pool: pg.Pool;
  private readonly clientConfig: pg.ClientConfig;
  private readonly key: number;
  private readonly listeners = new Set<ClusterListener>();
  /** Tag ids and shards never change once committed, so names are looked up once. */
  private readonly tags = new Map<string, KnownTag>();
  private closed = false;

  /** Use openPostgresStore, which sets the schema up first. */
  constructor(options: Required<PostgresStoreOptions>, clientConfig: pg.ClientConfig) {
    this.shards = options.shards;
    this.instance = options.instance;
    this.schema = options.schema;
    this.channel = channelFor(options.schema);
    this.key = lockKey(options.schema);
    this.clientConfig = clientConfig;
    this.pool = new pg.Pool({
      ...clientConfig,
      max: options.poolSize,
      application_name: `trueshift:${options.instance}`,
    });
    // An idle pooled connection that drops reports here; without a listener it would crash the
    // process. The pool discards it and the next query opens a new one.
    this.pool.on('error', () => undefined);
  }

  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    await Promise.all([...this.listeners].map((listener) => listener.close()));
    this.listeners.clear();
    await this.pool.end();
  }

  // ---- tags ----

  async upsertTag(tag: TagInput, now: number): Promise<TagRecord> {
    checkTagNames([tag.name]);
    return this.tx(async (client) => {
      // NO KEY: marks referencing the tag (a key share lock) need not wait for a settings change.
      const found = await client.query<TagRow>(
        'SELECT * FROM tags WHERE name = $1 FOR NO KEY UPDATE',
        [tag.name],
      );
      const existingRow = found.rows[0];
      const existing = existingRow === undefined ? undefined : tagFromRow(existingRow);
      const record = upsertedTagRecord(tag, existing, now);
      // RETURNING: should another instance have created the tag meanwhile, its createdAt stands.
      const stored = await client.query<TagRow>(
        `INSERT INTO tags (name, shard, unit, description, better, valid_min, valid_max, settings,
                           created_at, updated_at)
         VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10)
         ON CONFLICT (name) DO UPDATE SET
           unit = excluded.unit, description = excluded.description, better = excluded.better,
           valid_min = excluded.valid_min, valid_max = excluded.valid_max,
           settings = excluded.settings, updated_at = excluded.updated_at
         RETURNING *`,
        [
          record.name,
          shardOf(record.name, this.shards),
          record.unit,
          record.description,
          record.better,
          record.validMin,
          record.validMax,
          JSON.stringify(record.settings),
          record.createdAt,
          record.updatedAt,
        ],
      );
      const row = stored.rows[0];
      return row === undefined ? record : tagFromRow(row);
    });
  }

  async ensureTags(names: readonly string[], now: number): Promise<void> {
    checkTagNames(names);
    const known = await this.tx((client) =>
      this.tagIds(
        client,
        names.map((name) => ({ name, createdAt: now })),
      ),
    );
    this.remember(known);
  }

  async getTag(name: string): Promise<TagRecord | null> {
    const result = await this.pool.query<TagRow>('SELECT * FROM tags WHERE name = $1', [name]);
    const row = result.rows[0];
    return row === undefined ? null : tagFromRow(row);
  }

  async listTags(): Promise<TagRecord[]> {
    const result = await this.pool.query<TagRow>('SELECT * FROM tags ORDER BY name');
    return result.rows.map(tagFromRow);
  }

  // ---- samples ----

  async writeSamples(samples: readonly SampleInput[]): Promise<SampleWriteResult> {
    samples.forEach((sample, i) => {
      // bigint column: a time must be a whole number of milliseconds.
      checkSample(sample, i, true);
    });
    const result: SampleWriteResult = { inserted: 0, duplicates: 0, conflicts: 0 };
    if (samples.length === 0) return result;
    try {
      const known = await this.tx(async (client) => {
        const firstSeen = new Map<string, number>();
        for (const sample of samples) {
          if (!this.tags.has(sample.tag) && !firstSeen.has(sample.tag)) {
            firstSeen.set(sample.tag, sample.receivedAt);
          }
        }
        const created = await this.tagIds(
          client,
          [...firstSeen].map(([name, createdAt]) => ({ name, createdAt })),
        );
        const tagOf = (name: string): KnownTag => {
          const tag = this.tags.get(name) ?? created.get(name);
          if (tag === undefined) throw new TrueshiftError('INTERNAL', `Tag ${name} vanished.`);
          return tag;
        };

        const n = samples.length;
        const tagIds = new Array<number>(n);
        const times = new Array<number>(n);
        const values = new Array<number | null>(n);
        const qualities = new Array<number>(n);
        const shards = new Array<number>(n);
        const touched = new Set<number>();
        samples.forEach((sample, i) => {
          const tag = tagOf(sample.tag);
          tagIds[i] = tag.id;
          times[i] = sample.t;
          values[i] = sample.value;
          qualities[i] = sample.quality;
          shards[i] = tag.shard;
          touched.add(tag.shard);
        });

        // Within a shard, seq order must be commit order: a follower resuming after the last seq it
        // saw would otherwise miss a lower seq that commits later. Holding the shard's lock from
        // before nextval until the commit gives exactly that; ascending order cannot deadlock.
        const order = [...touched].sort((a, b) => a - b);
        await client.query({
          name: 'trueshift-lock-shards',
          text: 'SELECT pg_advisory_xact_lock($1, s) FROM unnest($2::integer[]) AS s',
          values: [this.key, order],
        });
        // ORDER BY ord: seqs follow the batch order (volatile nextval runs after the sort).
        const inserted = await client.query<[tagId: number, t: number, shard: number]>({
          name: 'trueshift-insert-samples',
          text: `INSERT INTO samples (tag_id, t, value, quality, shard, seq)
                 SELECT u.tag_id, u.t, u.value, u.quality, u.shard, nextval('samples_seq')
                   FROM unnest($1::integer[], $2::bigint[], $3::double precision[], $4::integer[],
                               $5::smallint[]) WITH ORDINALITY AS u(tag_id, t, value, quality, shard, ord)
                  ORDER BY u.ord
                 ON CONFLICT (tag_id, t) DO NOTHING
                 RETURNING tag_id, t, shard`,
          values: [tagIds, times, values, qualities, shards],
          rowMode: 'array',
        });
        result.inserted = inserted.rowCount ?? inserted.rows.length;

        if (result.inserted < n) {
          await this.classifyRest(client, samples, tagIds, inserted.rows, result);
        }
        if (result.inserted > 0) {
          const written = new Set<number>();
          for (const row of inserted.rows) written.add(row[2]);
          const all = [...written].sort((a, b) => a - b);
          // NOTIFY payloads end at 8000 bytes: a thousand shard numbers stay well below.
          for (let i = 0; i < all.length; i += 1000) {
            await this.notify(client, { kind: 'samples', shards: all.slice(i, i + 1000) });
          }
        }
        return created;
      });
      this.remember(known);
      return result;
    } catch (error) {
      throw asUnavailable(error, 'writing samples');
    }
  }

  async readSamples(tag: string, options: SampleReadOptions = {}): Promise<SampleColumns> {
    const from = options.from ?? Number.NEGATIVE_INFINITY;
    const to = options.to ?? Number.POSITIVE_INFINITY;
    if (Number.isNaN(from) || Number.isNaN(to)) {
      throw new TrueshiftError('INVALID_ARGUMENT', 'readSamples: from and to must be numbers.');
    }
    const limit = limitOf(options.limit, 'readSamples');
    const columns = new SampleColumnsBuilder();
    const known = await this.lookupTag(tag);
    if (known === undefined || limit === 0) return columns.finish(false);
    let lower = timeBound(from);
    let upper = timeBound(to);
    const good = options.goodOnly === true;
    const tagId = known.id;
    return this.scan(async (client) => {
      if (limit === null) {
        // Stored times are whole numbers, so the next page starts at the last time + 1.
        for (;;) {
          const n = await this.readPage(
            client,
            columns,
            tagId,
            lower,
            upper,
            READ_PAGE,
            good,
            false,
          );
          if (n < READ_PAGE) break;
          lower = columns.lastTime() + 1;
        }
        return columns.finish(false);
      }
      // The latest `limit` inside the bounds: walk down from `to`, then turn the columns around.
      let remaining = limit;
      while (remaining > 0) {
        const want = Math.min(READ_PAGE, remaining);
        const n = await this.readPage(client, columns, tagId, lower, upper, want, good, true);
        remaining -= n;
        if (n < want) break;
        upper = columns.lastTime();
      }
      return columns.finish(true);
    });
  }

  /**
   * One page of a tag's samples in [lower, upper), appended to `columns`; returns its length. The
   * server packs each column into one bytea of binary numbers: decoding those costs a fraction of
   * parsing a text number per field, and pages keep them to some hundred kB.
   */
  private async readPage(
    client: pg.ClientBase,
    columns: SampleColumnsBuilder,
    tagId: number,
    lower: number,
    upper: number,
    limit: number,
    good: boolean,
    descending: boolean,
  ): Promise<number> {
    const order = descending ? 'ORDER BY t DESC' : 'ORDER BY t';
    // The aggregates take the sorted subquery's order; appendPacked checks that order and sorts
    // itself should a server ever feed them otherwise (ORDER BY inside each aggregate would sort
    // the page three more times). Times below 2^53 are exact as float8; stored values are finite,
    // so NaN stands for no value.
    const result = await client.query<PageRow>({
      text: `SELECT count(*)::integer,
                    string_agg(float8send(t::double precision), ''::bytea),
                    string_agg(float8send(coalesce(value, 'NaN')), ''::bytea),
                    string_agg(int4send(quality), ''::bytea)
               FROM (SELECT t, value, quality FROM samples
                      WHERE tag_id = $1 AND t >= $2 AND t < $3
                            ${good ? `AND quality >= ${QUALITY_GOOD} AND value IS NOT NULL` : ''}
                      ${order} LIMIT $4) AS page`,
      values: [tagId, lower, upper, limit],
      rowMode: 'array',
    });
    const [n, t, value, quality] = result.rows[0] ?? [0, null, null, null];
    if (n > 0 && t !== null && value !== null && quality !== null) {
      appendPacked(columns, n, t, value, quality, descending);
    }
    return n;
  }

  async countSamples(tag?: string): Promise<number> {
    if (tag === undefined) {
      const result = await this.pool.query<{ n: number }>('SELECT count(*) AS n FROM samples');
      return result.rows[0]?.n ?? 0;
    }
    const known = await this.lookupTag(tag);
    if (known === undefined) return 0;
    const result = await this.pool.query<{ n: number }>(
      'SELECT count(*) AS n FROM samples WHERE tag_id = $1',
      [known.id],
    );
    return result.rows[0]?.n ?? 0;
  }

  async samplesAfter(afterSeq: number, limit: number, shard?: number): Promise<StoredSample[]> {
    if (shard !== undefined && !(Number.isInteger(shard) && shard >= 0 && shard < this.shards)) {
      throw new TrueshiftError(
        'INVALID_ARGUMENT',
        `The store has shards 0 to ${this.shards - 1}; shard ${shard} does not exist.`,
      );
    }
    if (Number.isNaN(afterSeq)) {
      throw new TrueshiftError('INVALID_ARGUMENT', 'samplesAfter: afterSeq must be a number.');
    }
    const max = limitOf(limit, 'samplesAfter');
    // Seqs are whole numbers: after 41.5 means after 41.
    const after = Math.max(-TIME_LIMIT, Math.min(TIME_LIMIT, Math.floor(afterSeq)));
    const where = shard === undefined ? '' : 'AND s.shard = $3';
    const values = shard === undefined ? [after, max] : [after, max, shard];
    // In scan(): a follower catching up from far behind must walk the seq index, not sort the rest
    // of the table for every page.
    const rows = await this.scan(async (client) => {
      const result = await client.query<StoredSampleRow>({
        text: `SELECT s.seq, g.name, s.t, s.value, s.quality
                 FROM samples s JOIN tags g ON g.id = s.tag_id
                WHERE s.seq > $1 ${where} ORDER BY s.seq LIMIT $2`,
        values,
        rowMode: 'array',
      });
      return result.rows;
    });
    return rows.map(([seq, tag, t, value, quality]) => ({ seq, tag, t, value, quality }));
  }

  async lastSeq(): Promise<number> {
    const result = await this.pool.query<{ seq: number | null }>(
      'SELECT max(seq) AS seq FROM samples',
    );
    return result.rows[0]?.seq ?? 0;
  }

  // ---- quarantine ----

  async quarantine(entries: readonly QuarantineInput[]): Promise<void> {
    if (entries.length === 0) return;
    await this.quarantineNow(this.pool, entries);
  }

  async listQuarantine(
    options: { limit?: number; beforeId?: number; source?: string } = {},
  ): Promise<QuarantineEntry[]> {
    const where: string[] = [];
    const params: unknown[] = [];
    if (options.beforeId !== undefined) {
      params.push(options.beforeId);
      where.push(`id < $${params.length}`);
    }
    if (options.source !== undefined) {
      params.push(options.source);
      where.push(`source = $${params.length}`);
    }
    params.push(limitOf(options.limit, 'listQuarantine'));
    const result = await this.pool.query<QuarantineRow>(
      `SELECT * FROM quarantine ${where.length > 0 ? `WHERE ${where.join(' AND ')}` : ''}
       ORDER BY id DESC LIMIT $${params.length}`,
      params,
    );
    return result.rows.map((row) => quarantineFromRow(row, row.raw.toString('utf8')));
  }

  async countQuarantine(): Promise<number> {
    const result = await this.pool.query<{ n: number }>('SELECT count(*) AS n FROM quarantine');
    return result.rows[0]?.n ?? 0;
  }

  // ---- marks ----

  async createMark(mark: MarkInput, by: string, now: number): Promise<MarkRecord> {
    checkMarkTags(mark.tags);
    const record = newMarkRecord(mark, randomUUID(), now);
    const known = await this.tx(async (client) => {
      await client.query(
        `INSERT INTO marks (id, at, label, note, direction, smallest_shift, n_before, n_after_cap,
                            risk_level, settling_ms, created_at, updated_at, withdrawn_at, revision)
         VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14)`,
        [
          record.id,
          record.at,
          record.label,
          record.note,
          record.direction,
          record.smallestShift,
          record.nBefore,
          record.nAfterCap,
          record.riskLevel,
          record.settlingMs,
          record.createdAt,
          record.updatedAt,
          record.withdrawnAt,
          record.revision,
        ],
      );
      const tags = await this.writeMarkTags(client, record, now);
      await this.addRevision(client, record, now, by, 'created', '');
      await this.notify(client, {
        kind: 'mark',
        origin: this.instance,
        markId: record.id,
        change: 'created',
      });
      return tags;
    });
    this.remember(known);
    return record;
  }

  async correctMark(
    id: string,
    patch: Partial<MarkInput>,
    by: string,
    reason: string,
    now: number,
  ): Promise<MarkRecord> {
    if (patch.tags !== undefined) checkMarkTags(patch.tags);
    const [record, known] = await this.tx(async (client) => {
      const current = await this.changeableMark(client, id);
      const next = correctedMarkRecord(current, patch, now);
      await client.query(
        `UPDATE marks SET at = $1, label = $2, note = $3, direction = $4, smallest_shift = $5,
                          n_before = $6, n_after_cap = $7, risk_level = $8, settling_ms = $9,
                          updated_at = $10, revision = $11
         WHERE id = $12`,
        [
          next.at,
          next.label,
          next.note,
          next.direction,
          next.smallestShift,
          next.nBefore,
          next.nAfterCap,
          next.riskLevel,
          next.settlingMs,
          next.updatedAt,
          next.revision,
          next.id,
        ],
      );
      let tags = new Map<string, KnownTag>();
      if (patch.tags !== undefined) {
        await client.query('DELETE FROM mark_tags WHERE mark_id = $1', [id]);
        tags = await this.writeMarkTags(client, next, now);
      }
      await this.addRevision(client, next, now, by, 'corrected', reason);
      await this.notify(client, {
        kind: 'mark',
        origin: this.instance,
        markId: id,
        change: 'corrected',
      });
      return [next, tags] as const;
    });
    this.remember(known);
    return record;
  }

  withdrawMark(id: string, by: string, reason: string, now: number): Promise<MarkRecord> {
    return this.tx(async (client) => {
      const current = await this.changeableMark(client, id);
      const record: MarkRecord = {
        ...current,
        withdrawnAt: now,
        updatedAt: now,
        revision: current.revision + 1,
      };
      await client.query(
        'UPDATE marks SET withdrawn_at = $1, updated_at = $2, revision = $3 WHERE id = $4',
        [record.withdrawnAt, record.updatedAt, record.revision, id],
      );
      await this.addRevision(client, record, now, by, 'withdrawn', reason);
      await this.notify(client, {
        kind: 'mark',
        origin: this.instance,
        markId: id,
        change: 'withdrawn',
      });
      return record;
    });
  }

  async getMark(id: string): Promise<MarkRecord | null> {
    return (await this.markNow(this.pool, id)) ?? null;
  }

  async listMarks(
    options: { tag?: string; includeWithdrawn?: boolean } = {},
  ): Promise<MarkRecord[]> {
    const where: string[] = [];
    const params: unknown[] = [];
    if (options.tag !== undefined) {
      const known = await this.lookupTag(options.tag);
      if (known === undefined) return [];
      params.push(known.id);
      where.push(
        `EXISTS (SELECT 1 FROM mark_tags mt WHERE mt.mark_id = m.id AND mt.tag_id = $${params.length})`,
      );
    }
    if (options.includeWithdrawn !== true) where.push('m.withdrawn_at IS NULL');
    const result = await this.pool.query<MarkRow>(
      `${MARK_SELECT} ${where.length > 0 ? `WHERE ${where.join(' AND ')}` : ''}
       ORDER BY m.at, m.created_at, m.id`,
      params,
    );
    return result.rows.map((row) => markFromRow(row, row.tags));
  }

  async markHistory(id: string): Promise<MarkRevision[]> {
    const result = await this.pool.query<MarkRevisionRow>(
      'SELECT * FROM mark_revisions WHERE mark_id = $1 ORDER BY revision',
      [id],
    );
    return result.rows.map(markRevisionFromRow);
  }

  // ---- evidence ----

  addEvidenceSnapshot(snapshot: EvidenceSnapshotInput): Promise<EvidenceSnapshot> {
    return this.tx(async (client) => {
      await this.requireMark(client, snapshot.markId);
      const result = await client.query<{ id: number }>(
        `INSERT INTO evidence_snapshots (mark_id, tag, sample_time, evaluated_at, n_after, risk,
                                         verdict, body)
         VALUES ($1, $2, $3, $4, $5, $6, $7, $8)
         RETURNING id`,
        [
          snapshot.markId,
          snapshot.tag,
          snapshot.sampleTime,
          snapshot.evaluatedAt,
          snapshot.nAfter,
          snapshot.risk,
          snapshot.verdict,
          toJson(snapshot.body),
        ],
      );
      const id = result.rows[0]?.id;
      if (id === undefined) throw new TrueshiftError('INTERNAL', 'The snapshot got no id.');
      await this.notify(client, { kind: 'evidence', origin: this.instance, snapshotId: id });
      return { ...snapshot, id };
    });
  }

  async listEvidenceSnapshots(
    markId: string,
    tag: string,
    options: { limit?: number } = {},
  ): Promise<EvidenceSnapshot[]> {
    // The latest `limit` evaluations, handed back in the order they were made.
    const result = await this.pool.query<EvidenceRow>(
      `SELECT * FROM (
         SELECT * FROM evidence_snapshots WHERE mark_id = $1 AND tag = $2
         ORDER BY evaluated_at DESC, id DESC LIMIT $3) AS latest
       ORDER BY evaluated_at, id`,
      [markId, tag, limitOf(options.limit, 'listEvidenceSnapshots')],
    );
    return result.rows.map(evidenceFromRow);
  }

  async latestEvidence(markId: string, tag: string): Promise<EvidenceSnapshot | null> {
    const result = await this.pool.query<EvidenceRow>(
      `SELECT * FROM evidence_snapshots WHERE mark_id = $1 AND tag = $2
       ORDER BY evaluated_at DESC, id DESC LIMIT 1`,
      [markId, tag],
    );
    const row = result.rows[0];
    return row === undefined ? null : evidenceFromRow(row);
  }

  async getEvidenceSnapshot(id: number): Promise<EvidenceSnapshot | null> {
    const result = await this.pool.query<EvidenceRow>(
      'SELECT * FROM evidence_snapshots WHERE id = $1',
      [id],
    );
    const row = result.rows[0];
    return row === undefined ? null : evidenceFromRow(row);
  }

  // ---- alerts ----

  raiseAlert(alert: AlertInput, outbox: readonly OutboxTarget[]): Promise<AlertChange> {
    return this.tx(async (client): Promise<AlertChange> => {
      if (alert.markId !== null) await this.requireMark(client, alert.markId);
      const repeat = async (open: AlertRow): Promise<AlertChange> => {
        // A repeat is news to nobody outside: it updates the record and sends nothing.
        await client.query(
          'UPDATE alerts SET repeats = repeats + 1, updated_at = $1, evidence = $2 WHERE id = $3',
          [alert.at, toJson(alert.evidence), open.id],
        );
        return { alert: await this.alertNow(client, open.id), change: 'repeated' };
      };
      const open = await this.uncleared(client, alert.dedupeKey);
      if (open !== undefined) return repeat(open);
      const inserted = await client.query<AlertRow>(
        `INSERT INTO alerts (tag, mark_id, kind, dedupe_key, title, state, opened_at, updated_at,
                             repeats, evidence)
         VALUES ($1, $2, $3, $4, $5, 'open', $6, $7, 0, $8)
         ON CONFLICT (dedupe_key) WHERE state <> 'cleared' DO NOTHING
         RETURNING *`,
        [
          alert.tag,
          alert.markId,
          alert.kind,
          alert.dedupeKey,
          alert.title,
          alert.at,
          alert.at,
          toJson(alert.evidence),
        ],
      );
      const row = inserted.rows[0];
      if (row === undefined) {
        // Another instance opened it between our look and our insert, and has committed since.
        const theirs = await this.uncleared(client, alert.dedupeKey);
        if (theirs === undefined) {
          throw new TrueshiftError('INTERNAL', `Alert ${alert.dedupeKey} vanished.`);
        }
        return repeat(theirs);
      }
      return this.announce(client, { alert: alertFromRow(row), change: 'opened' }, outbox);
    });
  }

  acknowledgeAlert(
    id: number,
    by: string,
    note: string,
    now: number,
    outbox: readonly OutboxTarget[],
  ): Promise<AlertChange> {
    return this.tx(async (client): Promise<AlertChange> => {
      const current = await this.changeableAlert(client, id);
      // Acknowledging twice (a retried request, two people at once) is answered, not re-sent.
      if (current.state === 'acknowledged') return { alert: current, change: 'acknowledged' };
      await client.query(
        `UPDATE alerts SET state = 'acknowledged', acknowledged_at = $1, acknowledged_by = $2,
                           note = $3, updated_at = $4
         WHERE id = $5`,
        [now, by, note, now, id],
      );
      return this.announce(
        client,
        { alert: await this.alertNow(client, id), change: 'acknowledged' },
        outbox,
      );
    });
  }

  clearAlert(
    id: number,
    now: number,
    outbox: readonly OutboxTarget[],
    note?: string,
  ): Promise<AlertChange> {
    return this.tx(async (client): Promise<AlertChange> => {
      await this.changeableAlert(client, id);
      await client.query(
        `UPDATE alerts SET state = 'cleared', cleared_at = $1, updated_at = $2,
           note = COALESCE($3, note) WHERE id = $4`,
        [now, now, note ?? null, id],
      );
      return this.announce(
        client,
        { alert: await this.alertNow(client, id), change: 'cleared' },
        outbox,
      );
    });
  }

  async getAlert(id: number): Promise<AlertRecord | null> {
    const result = await this.pool.query<AlertRow>('SELECT * FROM alerts WHERE id = $1', [id]);
    const row = result.rows[0];
    return row === undefined ? null : alertFromRow(row);
  }

  async listAlerts(
    options: { state?: AlertState; tag?: string; limit?: number } = {},
  ): Promise<AlertRecord[]> {
    const where: string[] = [];
    const params: unknown[] = [];
    if (options.state !== undefined) {
      params.push(options.state);
      where.push(`state = $${params.length}`);
    }
    if (options.tag !== undefined) {
      params.push(options.tag);
      where.push(`tag = $${params.length}`);
    }
    params.push(limitOf(options.limit, 'listAlerts'));
    const result = await this.pool.query<AlertRow>(
      `SELECT * FROM alerts ${where.length > 0 ? `WHERE ${where.join(' AND ')}` : ''}
       ORDER BY id DESC LIMIT $${params.length}`,
      params,
    );
    return result.rows.map(alertFromRow);
  }

  // ---- outbox ----

  async enqueueOutbox(entries: readonly OutboxInput[]): Promise<void> {
    await this.enqueueNow(this.pool, entries);
  }

  async dueOutbox(now: number, limit: number): Promise<OutboxRecord[]> {
    const result = await this.pool.query<OutboxRow>(
      `SELECT * FROM outbox WHERE state = 'pending' AND next_attempt_at <= $1
       ORDER BY id LIMIT $2`,
      [now, limitOf(limit, 'dueOutbox')],
    );
    return result.rows.map(outboxFromRow);
  }

  async markDelivered(id: number, now: number): Promise<void> {
    // A late second success must not move the first delivery time.
    await this.pool.query(
      `UPDATE outbox SET state = 'delivered', delivered_at = $1
       WHERE id = $2 AND state <> 'delivered'`,
      [now, id],
    );
  }

  async markAttemptFailed(
    id: number,
    error: string,
    nextAttemptAt: number,
    dead: boolean,
  ): Promise<void> {
    // Only a pending entry can fail: a slow attempt reporting after a delivery changes nothing.
    await this.pool.query(
      `UPDATE outbox SET attempts = attempts + 1, last_error = $1, next_attempt_at = $2, state = $3
       WHERE id = $4 AND state = 'pending'`,
      [cutUtf8(error), nextAttemptAt, dead ? 'dead' : 'pending', id],
    );
  }

  async listOutbox(options: { state?: OutboxState; limit?: number } = {}): Promise<OutboxRecord[]> {
    const limit = limitOf(options.limit, 'listOutbox');
    const result =
      options.state === undefined
        ? await this.pool.query<OutboxRow>('SELECT * FROM outbox ORDER BY id DESC LIMIT $1', [
            limit,
          ])
        : await this.pool.query<OutboxRow>(
            'SELECT * FROM outbox WHERE state = $1 ORDER BY id DESC LIMIT $2',
            [options.state, limit],
          );
    return result.rows.map(outboxFromRow);
  }

  async countOutbox(): Promise<Record<OutboxState, number>> {
    const counts: Record<OutboxState, number> = { pending: 0, delivered: 0, dead: 0 };
    const result = await this.pool.query<{ state: OutboxState; n: number }>(
      'SELECT state, count(*) AS n FROM outbox GROUP BY state',
    );
    for (const row of result.rows) counts[row.state] = row.n;
    return counts;
  }

  // ---- analyser state ----

  async saveAnalyserState(
    records: readonly AnalyserStateRecord[],
    fence?: LeaseFence,
  ): Promise<void> {
    // One row per key, the last record of a key winning, as if they were saved one by one.
    const last = new Map<string, AnalyserStateRecord>();
    for (const record of records) last.set(record.key, record);
    const rows = [...last.values()];
    await this.tx(async (client) => {
      if (fence !== undefined) {
        // FOR UPDATE holds the lease row to the commit: nobody can take the shard in between.
        const held = await client.query(
          'SELECT 1 FROM leases WHERE shard = $1 AND owner = $2 AND epoch = $3 FOR UPDATE',
          [fence.shard, fence.owner, fence.epoch],
        );
        if (held.rows.length === 0) {
          throw new TrueshiftError(
            'LEASE_LOST',
            `Shard ${fence.shard} is not held by ${fence.owner} at epoch ${fence.epoch}.`,
          );
        }
      }
      if (rows.length === 0) return;
      await client.query(
        `INSERT INTO analyser_state (key, state, last_seq, updated_at)
         SELECT * FROM unnest($1::text[], $2::text[], $3::bigint[], $4::bigint[])
         ON CONFLICT (key) DO UPDATE SET
           state = excluded.state, last_seq = excluded.last_seq, updated_at = excluded.updated_at`,
        [
          rows.map((r) => r.key),
          rows.map((r) => toJson(r.state)),
          rows.map((r) => r.lastSeq),
          rows.map((r) => r.updatedAt),
        ],
      );
    });
  }

  async loadAnalyserState(key: string): Promise<AnalyserStateRecord | null> {
    const result = await this.pool.query<AnalyserStateRow>(
      'SELECT * FROM analyser_state WHERE key = $1',
      [key],
    );
    const row = result.rows[0];
    return row === undefined ? null : analyserStateFromRow(row);
  }

  async listAnalyserState(prefix = ''): Promise<AnalyserStateRecord[]> {
    // `key >= prefix` lets the primary key start the scan; starts_with decides the match exactly.
    const result = await this.pool.query<AnalyserStateRow>(
      `SELECT * FROM analyser_state WHERE key >= $1 AND starts_with(key, $1) ORDER BY key`,
      [prefix],
    );
    return result.rows.map(analyserStateFromRow);
  }

  // ---- files ----

  async recordFile(file: FileRecord): Promise<boolean> {
    const result = await this.pool.query(
      `INSERT INTO files (hash, name, taken_at, summary) VALUES ($1, $2, $3, $4)
       ON CONFLICT (hash) DO NOTHING`,
      [file.hash, file.name, file.takenAt, toJson(file.summary)],
    );
    return result.rowCount === 1;
  }

  // ---- tokens ----

  async createToken(token: TokenInput): Promise<TokenRecord> {
    await this.pool.query(
      `INSERT INTO tokens (id, name, hash, scopes, created_at, revoked_at)
       VALUES ($1, $2, $3, $4, $5, NULL)`,
      [token.id, token.name, token.hash, JSON.stringify(token.scopes), token.createdAt],
    );
    return { ...token, scopes: [...token.scopes], revokedAt: null };
  }

  async findTokenByHash(hash: string): Promise<TokenRecord | null> {
    const result = await this.pool.query<TokenRow>('SELECT * FROM tokens WHERE hash = $1', [hash]);
    const row = result.rows[0];
    return row === undefined ? null : tokenFromRow(row);
  }

  async listTokens(): Promise<TokenRecord[]> {
    const result = await this.pool.query<TokenRow>('SELECT * FROM tokens ORDER BY created_at, id');
    return result.rows.map(tokenFromRow);
  }

  async revokeToken(id: string, now: number): Promise<TokenRecord> {
    // One statement: revoking again keeps the first time, and the row comes back either way.
    const result = await this.pool.query<TokenRow>(
      `WITH revoked AS (
         UPDATE tokens SET revoked_at = $2 WHERE id = $1 AND revoked_at IS NULL RETURNING *)
       SELECT * FROM revoked
       UNION ALL
       SELECT * FROM tokens WHERE id = $1 AND NOT EXISTS (SELECT 1 FROM revoked)`,
      [id, now],
    );
    const row = result.rows[0];
    if (row === undefined) throw new TrueshiftError('TOKEN_NOT_FOUND', `Token ${id}.`);
    return tokenFromRow(row);
  }

  // ---- cluster ----

  async heartbeat(now: number, until: number): Promise<string[]> {
    // The name is this process's while its last beat lasts; another process may take it over
    // only once that has run out (a restart after a crash waits at most one lease length).
    const beat = await this.pool.query(
      `INSERT INTO instances (id, alive_until, incarnation) VALUES ($1, $2, $4)
       ON CONFLICT (id) DO UPDATE SET alive_until = excluded.alive_until,
         incarnation = excluded.incarnation
       WHERE instances.incarnation = excluded.incarnation OR instances.alive_until <= $3`,
      [this.instance, until, now, this.incarnation],
    );
    if (beat.rowCount === 0) {
      throw new TrueshiftError(
        'INSTANCE_NAME_TAKEN',
        `Another running process uses the instance name "${this.instance}"; this one takes no shards until that one has been silent for a lease length.`,
      );
    }
    const result = await this.pool.query<{ id: string }>(
      `SELECT id FROM instances WHERE alive_until > $2::bigint AND id <> $1::text
       UNION
       SELECT $1::text WHERE $3::bigint > $2::bigint
       ORDER BY id`,
      [this.instance, now, until],
    );
    return result.rows.map((row) => row.id);
  }

  async renewLeases(now: number, until: number): Promise<Lease[]> {
    const result = await this.pool.query<LeaseRow>(
      `UPDATE leases SET expires_at = $3 WHERE owner = $1 AND expires_at > $2
       RETURNING shard, owner, epoch, expires_at`,
      [this.instance, now, until],
    );
    return result.rows.map(leaseFromRow).sort(byShard);
  }

  async claimLeases(count: number, now: number, until: number): Promise<Lease[]> {
    if (!Number.isSafeInteger(count) || count < 0) {
      throw new TrueshiftError(
        'INVALID_ARGUMENT',
        'claimLeases: count must be a whole number >= 0.',
      );
    }
    if (count === 0) return [];
    // SKIP LOCKED: instances claiming at once each take different shards instead of waiting.
    const result = await this.pool.query<LeaseRow>(
      `WITH free AS (
         SELECT shard FROM leases WHERE owner IS NULL OR expires_at <= $2
          ORDER BY shard LIMIT $3 FOR UPDATE SKIP LOCKED)
       UPDATE leases l SET owner = $1, epoch = l.epoch + 1, expires_at = $4
         FROM free WHERE l.shard = free.shard
       RETURNING l.shard, l.owner, l.epoch, l.expires_at`,
      [this.instance, now, count, until],
    );
    return result.rows.map(leaseFromRow).sort(byShard);
  }

  async releaseLease(shard: number): Promise<void> {
    await this.pool.query('UPDATE leases SET owner = NULL WHERE shard = $1 AND owner = $2', [
      shard,
      this.instance,
    ]);
  }

  /** The shards somebody holds or held and nobody has taken back, expired ones included. */
  async listLeases(): Promise<Lease[]> {
    const result = await this.pool.query<LeaseRow>(
      `SELECT shard, owner, epoch, expires_at FROM leases WHERE owner IS NOT NULL ORDER BY shard`,
    );
    return result.rows.map(leaseFromRow);
  }

  async listen(
    listener: (message: ClusterMessage) => void,
    onGap?: () => void,
  ): Promise<() => Promise<void>> {
    if (this.closed) throw new TrueshiftError('INTERNAL', 'The store is closed.');
    const listening = new ClusterListener({
      config: { ...this.clientConfig, application_name: `trueshift-listen:${this.instance}` },
      channel: this.channel,
      listener,
      onGap,
    });
    await listening.start();
    this.listeners.add(listening);
    return async () => {
      this.listeners.delete(listening);
      await listening.close();
    };
  }

  // ---- inside ----

  /** One read-write transaction. */
  private tx<T>(work: (client: pg.PoolClient) => Promise<T>): Promise<T> {
    return this.transaction('BEGIN', work);
  }

  /**
   * A read on one connection in one snapshot, so the pages of a long read agree with each other.
   * Pages must walk an index in its order (time within a tag, or seq): sorting is switched off for
   * the read, because a planner without statistics yet (a new or freshly loaded table) expects a
   * few rows and would sort the whole rest of the history for every page.
   */
  private scan<T>(work: (client: pg.PoolClient) => Promise<T>): Promise<T> {
    return this.transaction(
      'BEGIN ISOLATION LEVEL REPEATABLE READ READ ONLY; SET LOCAL enable_sort = off; SET LOCAL enable_bitmapscan = off',
      work,
    );
  }

  /** A transaction on one pooled connection; a connection that could not roll back is dropped. */
  private async transaction<T>(
    begin: string,
    work: (client: pg.PoolClient) => Promise<T>,
  ): Promise<T> {
    const client = await this.pool.connect();
    let broken: Error | undefined;
    try {
      await client.query(begin);
      const result = await work(client);
      await client.query('COMMIT');
      return result;
    } catch (error) {
      await client.query('ROLLBACK').catch((rollbackError: unknown) => {
        broken = rollbackError instanceof Error ? rollbackError : new Error(String(rollbackError));
      });
      throw error;
    } finally {
      client.release(broken);
    }
  }

  private async notify(client: pg.ClientBase, message: ClusterMessage): Promise<void> {
    await client.query('SELECT pg_notify($1, $2)', [this.channel, JSON.stringify(message)]);
  }

  /** Tags are remembered only once the transaction that made them has committed. */
  private remember(known: ReadonlyMap<string, KnownTag>): void {
    for (const [name, tag] of known) this.tags.set(name, tag);
  }

  private async lookupTag(name: string): Promise<KnownTag | undefined> {
    const cached = this.tags.get(name);
    if (cached !== undefined) return cached;
    const result = await this.pool.query<KnownTag>('SELECT id, shard FROM tags WHERE name = $1', [
      name,
    ]);
    const row = result.rows[0];
    if (row !== undefined) this.tags.set(name, row);
    return row;
  }

  /**
   * Ids and shards of the named tags, creating missing ones with default settings. New tags are
   * inserted in name order, so two writers creating the same tags cannot deadlock on them.
   */
  private async tagIds(
    client: pg.ClientBase,
    wanted: readonly { name: string; createdAt: number }[],
  ): Promise<Map<string, KnownTag>> {
    const found = new Map<string, KnownTag>();
    const missing = new Map<string, number>();
    for (const { name, createdAt } of wanted) {
      const cached = this.tags.get(name);
      if (cached !== undefined) found.set(name, cached);
      else if (!missing.has(name)) missing.set(name, createdAt);
    }
    if (missing.size === 0) return found;
    const names = [...missing.keys()].sort((a, b) => (a < b ? -1 : a > b ? 1 : 0));
    await client.query(
      `INSERT INTO tags (name, shard, better, settings, created_at, updated_at)
       SELECT u.name, u.shard, 'either', '{}', u.created_at, u.created_at
         FROM unnest($1::text[], $2::smallint[], $3::bigint[]) WITH ORDINALITY
              AS u(name, shard, created_at, ord)
        ORDER BY u.ord
       ON CONFLICT (name) DO NOTHING`,
      [
        names,
        names.map((name) => shardOf(name, this.shards)),
        names.map((name) => missing.get(name)),
      ],
    );
    const rows = await client.query<KnownTag & { name: string }>(
      'SELECT name, id, shard FROM tags WHERE name = ANY($1::text[])',
      [names],
    );
    for (const row of rows.rows) found.set(row.name, { id: row.id, shard: row.shard });
    return found;
  }

  /**
   * Sorts the samples the insert skipped into replays and conflicts, against the stored sample or
   * against the one earlier in this batch that was stored, and quarantines the conflicts.
   */
  private async classifyRest(
    client: pg.ClientBase,
    samples: readonly SampleInput[],
    tagIds: readonly number[],
    insertedRows: readonly (readonly [number, number, ...unknown[]])[],
    result: SampleWriteResult,
  ): Promise<void> {
    const keyOf = (tagId: number, t: number): string => `${tagId}:${t}`;
    const fresh = new Set(insertedRows.map(([tagId, t]) => keyOf(tagId, t)));
    /** What each (tag, time) holds now: stored before, or stored by this batch. */
    const holds = new Map<string, [value: number | null, quality: number]>();
    const skipped: number[] = [];
    samples.forEach((sample, i) => {
      const key = keyOf(tagIds[i] ?? 0, sample.t);
      if (fresh.has(key) && !holds.has(key)) holds.set(key, [sample.value, sample.quality]);
      else skipped.push(i);
    });
    const ask = skipped.filter((i) => !fresh.has(keyOf(tagIds[i] ?? 0, samples[i]?.t ?? 0)));
    if (ask.length > 0) {
      const stored = await client.query<[number, number, number | null, number]>({
        name: 'trueshift-stored-samples',
        text: `SELECT s.tag_id, s.t, s.value, s.quality
                 FROM samples s
                 JOIN unnest($1::integer[], $2::bigint[]) AS k(tag_id, t)
                   ON s.tag_id = k.tag_id AND s.t = k.t`,
        values: [ask.map((i) => tagIds[i]), ask.map((i) => samples[i]?.t)],
        rowMode: 'array',
      });
      for (const [tagId, t, value, quality] of stored.rows) {
        holds.set(keyOf(tagId, t), [value, quality]);
      }
    }
    const conflicts: QuarantineInput[] = [];
    for (const i of skipped) {
      const sample = samples[i];
      if (sample === undefined) continue;
      const held = holds.get(keyOf(tagIds[i] ?? 0, sample.t));
      if (held === undefined) {
        throw new TrueshiftError('INTERNAL', `Sample ${sample.tag} ${sample.t} vanished.`);
      }
      const [value, quality] = held;
      if (value === sample.value && quality === sample.quality) {
        result.duplicates++;
        continue;
      }
      result.conflicts++;
      conflicts.push({
        source: sample.source,
        raw: JSON.stringify(sample),
        reason: conflictReason(sample, value, quality),
        code: 'SAMPLE_CONFLICT',
        tag: sample.tag,
        receivedAt: sample.receivedAt,
      });
    }
    if (conflicts.length > 0) await this.quarantineNow(client, conflicts);
  }

  /** One statement, so the entries are kept together or not at all, in the order given. */
  private async quarantineNow(
    client: pg.ClientBase | pg.Pool,
    entries: readonly QuarantineInput[],
  ): Promise<void> {
    await client.query(
      `INSERT INTO quarantine (source, raw, reason, code, tag, received_at)
       SELECT u.source, u.raw, u.reason, u.code, u.tag, u.received_at
         FROM unnest($1::text[], $2::bytea[], $3::text[], $4::text[], $5::text[], $6::bigint[])
              WITH ORDINALITY AS u(source, raw, reason, code, tag, received_at, ord)
        ORDER BY u.ord`,
      [
        entries.map((e) => e.source),
        entries.map((e) => Buffer.from(cutUtf8(e.raw), 'utf8')),
        entries.map((e) => e.reason),
        entries.map((e) => e.code),
        entries.map((e) => e.tag ?? null),
        entries.map((e) => e.receivedAt),
      ],
    );
  }

  private async markNow(
    client: pg.ClientBase | pg.Pool,
    id: string,
    lock = false,
  ): Promise<MarkRecord | undefined> {
    const result = await client.query<MarkRow>(
      `${MARK_SELECT} WHERE m.id = $1${lock ? ' FOR UPDATE OF m' : ''}`,
      [id],
    );
    const row = result.rows[0];
    return row === undefined ? undefined : markFromRow(row, row.tags);
  }

  private async requireMark(client: pg.ClientBase, id: string): Promise<MarkRecord> {
    return existingMark(await this.markNow(client, id), id);
  }

  /** The mark, locked to the commit, so concurrent corrections take turns and count revisions. */
  private async changeableMark(client: pg.ClientBase, id: string): Promise<MarkRecord> {
    return changeableMark(await this.markNow(client, id, true), id);
  }

  private async writeMarkTags(
    client: pg.ClientBase,
    mark: MarkRecord,
    now: number,
  ): Promise<Map<string, KnownTag>> {
    const known = await this.tagIds(
      client,
      mark.tags.map((name) => ({ name, createdAt: now })),
    );
    await client.query(
      `INSERT INTO mark_tags (mark_id, position, tag_id)
       SELECT $1, u.position - 1, u.tag_id
         FROM unnest($2::integer[]) WITH ORDINALITY AS u(tag_id, position)`,
      [mark.id, mark.tags.map((name) => known.get(name)?.id)],
    );
    return known;
  }

  private async addRevision(
    client: pg.ClientBase,
    mark: MarkRecord,
    now: number,
    by: string,
    action: MarkRevision['action'],
    reason: string,
  ): Promise<void> {
    await client.query(
      `INSERT INTO mark_revisions (mark_id, revision, changed_at, changed_by, action, reason, mark)
       VALUES ($1, $2, $3, $4, $5, $6, $7)`,
      [mark.id, mark.revision, now, by, action, reason, JSON.stringify(mark)],
    );
  }

  private async uncleared(client: pg.ClientBase, dedupeKey: string): Promise<AlertRow | undefined> {
    const result = await client.query<AlertRow>(
      `SELECT * FROM alerts WHERE dedupe_key = $1 AND state <> 'cleared' FOR UPDATE`,
      [dedupeKey],
    );
    return result.rows[0];
  }

  private async alertNow(client: pg.ClientBase, id: number, lock = false): Promise<AlertRecord> {
    const result = await client.query<AlertRow>(
      `SELECT * FROM alerts WHERE id = $1${lock ? ' FOR UPDATE' : ''}`,
      [id],
    );
    const row = result.rows[0];
    if (row === undefined) throw new TrueshiftError('ALERT_NOT_FOUND', `Alert ${id}.`);
    return alertFromRow(row);
  }

  private async changeableAlert(client: pg.ClientBase, id: number): Promise<AlertRecord> {
    return changeableAlert(await this.alertNow(client, id, true));
  }

  /**
   * Queues the change for every target and tells the other instances, in the caller's
   * transaction: saved and sent together or not at all.
   */
  private async announce(
    client: pg.ClientBase,
    change: AlertChange,
    targets: readonly OutboxTarget[],
  ): Promise<AlertChange> {
    await this.enqueueNow(client, announcements(change, targets));
    await this.notify(client, {
      kind: 'alert',
      origin: this.instance,
      alertId: change.alert.id,
      change: change.change,
    });
    return change;
  }

  /** One statement, so the entries are queued together or not at all, in the order given. */
  private async enqueueNow(
    client: pg.ClientBase | pg.Pool,
    entries: readonly OutboxInput[],
  ): Promise<void> {
    if (entries.length === 0) return;
    await client.query(
      `INSERT INTO outbox (channel, target, idempotency_key, payload, created_at, state, attempts,
                           next_attempt_at)
       SELECT u.channel, u.target, u.key, u.payload, u.created_at, 'pending', 0, u.created_at
         FROM unnest($1::text[], $2::text[], $3::text[], $4::text[], $5::bigint[])
              WITH ORDINALITY AS u(channel, target, key, payload, created_at, ord)
        ORDER BY u.ord
       ON CONFLICT (channel, target, idempotency_key) DO NOTHING`,
      [
        entries.map((e) => e.channel),
        entries.map((e) => e.target),
        entries.map((e) => e.idempotencyKey),
        entries.map((e) => toJson(e.payload)),
        entries.map((e) => e.createdAt),
      ],
    );
  }
}

/** NOTIFY channel names are identifiers of at most 63 bytes. */
function channelFor(schema: string): string {
  if (schema === 'public') return CHANNEL;
  const name = `${CHANNEL}_${schema}`;
  return name.length <= 63 ? name : `${CHANNEL}_${(lockKey(schema) >>> 0).toString(16)}`;
}

const SCHEMA_NAME = /^[a-z_][a-z0-9_]{0,62}$/;

/**
 * Connects, creates or upgrades the schema (instances starting together take turns) and checks the
 * shard count against the one the schema was created with.
 */
export async function openPostgresStore(options: PostgresStoreOptions): Promise<PostgresStore> {
  const settled: Required<PostgresStoreOptions> = {
    url: options.url,
    shards: options.shards ?? 1,
    instance: options.instance ?? randomUUID(),
    schema: options.schema ?? 'public',
    poolSize: options.poolSize ?? 10,
  };
  if (!SCHEMA_NAME.test(settled.schema)) {
    throw new TrueshiftError(
      'CONFIG_INVALID',
      `The schema name "${settled.schema}" must be lower-case letters, digits and _, at most 63.`,
    );
  }
  if (!(Number.isInteger(settled.shards) && settled.shards >= 1 && settled.shards <= 32_767)) {
    throw new TrueshiftError(
      'CONFIG_INVALID',
      `shards must be a whole number from 1 to 32767, got ${settled.shards}.`,
    );
  }
  if (!(Number.isInteger(settled.poolSize) && settled.poolSize >= 1)) {
    throw new TrueshiftError(
      'CONFIG_INVALID',
      `poolSize must be a whole number >= 1, got ${settled.poolSize}.`,
    );
  }
  if (settled.instance.length === 0) {
    throw new TrueshiftError('CONFIG_INVALID', 'The instance needs a name.');
  }
  const clientConfig: pg.ClientConfig = {
    connectionString: settled.url,
    types: TYPES,
    // Every connection, pooled or listening, resolves table names in the store's schema, and writes
    // doubles as text that reads back to the same number (shortest exact form).
    options: `-c search_path=${settled.schema} -c extra_float_digits=3`,
  };
  // Set-up runs on a connection of its own, before the pool exists: a failure leaves nothing open.
  const setup = new pg.Client(clientConfig);
  setup.on('error', () => undefined);
  try {
    await setup.connect();
    await applyMigrations(setup, settled.schema, settled.shards);
  } catch (error) {
    throw asUnavailable(error, 'opening the store');
  } finally {
    await setup.end().catch(() => undefined);
  }
  const store = new PostgresStore(settled, clientConfig);
  return store;
}
