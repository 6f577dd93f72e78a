import { randomUUID } from 'node:crypto';
import Database from 'better-sqlite3';
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
  parseJson,
  quarantineFromRow,
  QUALITY_GOOD,
  SampleColumnsBuilder,
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
  TagRow,
  TokenRow,
  AlertChange,
  AlertInput,
  AlertRecord,
  AlertState,
  AnalyserStateRecord,
  EvidenceSnapshot,
  EvidenceSnapshotInput,
  FileRecord,
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
  Store,
  StoredSample,
  TagInput,
  TagRecord,
  TokenInput,
  TokenRecord,
} from '@trueshift/store';
import { applyMigrations } from './migrations.js';

export interface SqliteStoreOptions {
  /** A file path, or ':memory:' for a store that lives as long as the process. */
  path: string;
  /** How long a write waits for another process's lock before failing; 5 s by default. */
  busyTimeoutMs?: number;
}

/** Outbox targets for an alert change: the store adds the payload and the idempotency key. */
type OutboxTarget = Omit<OutboxInput, 'payload' | 'idempotencyKey'>;

/** Rows read per page by readSamples: small pages keep garbage young and cheap to collect. */
const READ_PAGE = 8192;

type SampleRow = [t: number, value: number | null, quality: number];
type StoredSampleRow = [seq: number, tag: string, t: number, value: number | null, quality: number];

interface QuarantineRow extends QuarantineColumns {
  raw: string;
}

/** Its tags gathered into one JSON array by MARK_SELECT. */
interface MarkRow extends MarkColumns {
  tags: string;
}

const MARK_SELECT = `
  SELECT m.*,
    (SELECT json_group_array(t.name ORDER BY mt.position)
       FROM mark_tags mt JOIN tags t ON t.id = mt.tag_id
      WHERE mt.mark_id = m.id) AS tags
  FROM marks m`;

/** A limit for SQLite: -1 is no limit. */
function limitOf(limit: number | undefined, what: string): number {
  return checkLimit(limit, what) ?? -1;
}

/** Appends a page of rows to the columns being gathered. */
function appendRows(columns: SampleColumnsBuilder, rows: readonly SampleRow[]): void {
  const at = columns.reserve(rows.length);
  rows.forEach((row, k) => {
    columns.set(at + k, row[0], row[1] ?? Number.NaN, row[2]);
  });
}

/**
 * The Store on one SQLite file through one connection, which is the only writer. Every method
 * answers synchronously underneath; the promises are there for the contract's networked backends.
 */
export class SqliteStore implements Store {
  /** One process owns a SQLite file, so there is nothing to share out. */
  readonly shards = 1;
  private readonly db: Database.Database;
  private readonly statements = new Map<string, Database.Statement>();
  private readonly rawStatements = new Map<string, Database.Statement<unknown[], unknown[]>>();
  /** Tag ids never change once given, so names are looked up once. */
  private readonly tagIds = new Map<string, number>();

  constructor(options: SqliteStoreOptions) {
    const db = new Database(options.path, { timeout: options.busyTimeoutMs ?? 5000 });
    try {
      const mode = db.pragma('journal_mode = WAL', { simple: true });
      if (mode !== 'wal' && !db.memory) {
        throw new TrueshiftError(
          'CONFIG_INVALID',
          `SQLite cannot keep ${options.path} in WAL journal mode (it answered "${String(mode)}"); put the store on a local disk.`,
        );
      }
      // WAL with synchronous=NORMAL syncs only at checkpoints, not at every commit. A crash of the
      // application (even SIGKILL) still keeps every committed transaction, because the commit is
      // in the WAL file the OS holds; only a power cut or OS crash can lose the last few commits,
      // and never leaves a torn one. For a plant historian that is the right price for the speed.
      db.pragma('synchronous = NORMAL');
      db.pragma('foreign_keys = ON');
      // Ingest touches one b-tree leaf per tag in every batch: 64 MiB keeps those leaves of some
      // thousands of tags in memory instead of re-reading them.
      db.pragma('cache_size = -65536');
      // Checkpoints sync the disk. Leaf pages of busy tags are rewritten in every batch, so a longer
      // WAL (up to ~40 MiB) writes each of them back once per checkpoint instead of many times;
      // measured about twice the ingest rate with 1,000 tags.
      db.pragma('wal_autocheckpoint = 10000');
      applyMigrations(db);
    } catch (error) {
      db.close();
      throw error;
    }
    this.db = db;
  }

  /** The SQLite connection, for inspection in tests and tools; do not write through it. */
  get connection(): Database.Database {
    return this.db;
  }

  close(): Promise<void> {
    return this.call(() => {
      if (!this.db.open) return;
      // Recommended by SQLite before closing a long-lived connection: refreshes planner statistics.
      this.db.pragma('optimize');
      this.db.close();
    });
  }

  // ---- tags ----

  upsertTag(tag: TagInput, now: number): Promise<TagRecord> {
    return this.call(() => {
      checkTagNames([tag.name]);
      return this.write(() => {
        const existingRow = this.tagRow(tag.name);
        const existing = existingRow === undefined ? undefined : tagFromRow(existingRow);
        const record = upsertedTagRecord(tag, existing, now);
        this.stmt(
          `INSERT INTO tags (name, unit, description, better, valid_min, valid_max, settings,
                             created_at, updated_at)
           VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)
           ON CONFLICT (name) DO UPDATE SET
             unit = excluded.unit, description = excluded.description, better = excluded.better,
             valid_min = excluded.valid_min, valid_max = excluded.valid_max,
             settings = excluded.settings, updated_at = excluded.updated_at`,
        ).run(
          record.name,
          record.unit,
          record.description,
          record.better,
          record.validMin,
          record.validMax,
          JSON.stringify(record.settings),
          record.createdAt,
          record.updatedAt,
        );
        return record;
      });
    });
  }

  ensureTags(names: readonly string[], now: number): Promise<void> {
    return this.call(() => {
      checkTagNames(names);
      this.write(() => {
        for (const name of names) this.tagId(name, now);
      });
    });
  }

  getTag(name: string): Promise<TagRecord | null> {
    return this.call(() => {
      const row = this.tagRow(name);
      return row === undefined ? null : tagFromRow(row);
    });
  }

  listTags(): Promise<TagRecord[]> {
    return this.call(() =>
      this.stmt<TagRow>('SELECT * FROM tags ORDER BY name').all().map(tagFromRow),
    );
  }

  // ---- samples ----

  writeSamples(samples: readonly SampleInput[]): Promise<SampleWriteResult> {
    return this.call(() => {
      samples.forEach((sample, i) => {
        checkSample(sample, i);
      });
      return this.write(() => {
        const insert = this.stmt(
          // Only a clash on (tag, time) is expected; a clash on seq must fail loudly.
          `INSERT INTO samples (tag_id, t, value, quality, seq) VALUES (?, ?, ?, ?, ?)
           ON CONFLICT (tag_id, t) DO NOTHING`,
        );
        const stored = this.raw<[value: number | null, quality: number]>(
          'SELECT value, quality FROM samples WHERE tag_id = ? AND t = ?',
        );
        // Inside an IMMEDIATE transaction nobody else can write, so max(seq) + 1 is ours to take.
        let seq = this.lastSeqNow();
        const result: SampleWriteResult = { inserted: 0, duplicates: 0, conflicts: 0 };
        for (const sample of samples) {
          const tagId = this.tagId(sample.tag, sample.receivedAt);
          if (insert.run(tagId, sample.t, sample.value, sample.quality, seq + 1).changes === 1) {
            seq++;
            result.inserted++;
            continue;
          }
          const row = stored.get(tagId, sample.t);
          if (row === undefined) {
            throw new TrueshiftError('INTERNAL', `Sample ${sample.tag} ${sample.t} vanished.`);
          }
          const [value, quality] = row;
          if (value === sample.value && quality === sample.quality) {
            result.duplicates++;
            continue;
          }
          result.conflicts++;
          this.quarantineOne({
            source: sample.source,
            raw: JSON.stringify(sample),
            reason: conflictReason(sample, value, quality),
            code: 'SAMPLE_CONFLICT',
            tag: sample.tag,
            receivedAt: sample.receivedAt,
          });
        }
        return result;
      });
    });
  }

  readSamples(tag: string, options: SampleReadOptions = {}): Promise<SampleColumns> {
    return this.call(() => {
      const from = options.from ?? Number.NEGATIVE_INFINITY;
      const to = options.to ?? Number.POSITIVE_INFINITY;
      if (Number.isNaN(from) || Number.isNaN(to)) {
        throw new TrueshiftError('INVALID_ARGUMENT', 'readSamples: from and to must be numbers.');
      }
      const limit = limitOf(options.limit, 'readSamples');
      const columns = new SampleColumnsBuilder();
      const tagId = this.lookupTagId(tag);
      if (tagId === undefined) return columns.finish(false);
      const good =
        options.goodOnly === true ? ` AND quality >= ${QUALITY_GOOD} AND value IS NOT NULL` : '';
      // Pages by key (t > last) rather than one big all(): a million row arrays at once cost
      // seconds of garbage collection, pages of a few thousand cost almost nothing.
      if (limit === -1) {
        const first = this.raw<SampleRow>(
          `SELECT t, value, quality FROM samples WHERE tag_id = ? AND t >= ? AND t < ?${good}
           ORDER BY t LIMIT ${READ_PAGE}`,
        );
        const next = this.raw<SampleRow>(
          `SELECT t, value, quality FROM samples WHERE tag_id = ? AND t > ? AND t < ?${good}
           ORDER BY t LIMIT ${READ_PAGE}`,
        );
        let rows = first.all(tagId, from, to);
        for (;;) {
          appendRows(columns, rows);
          if (rows.length < READ_PAGE) break;
          rows = next.all(tagId, columns.lastTime(), to);
        }
        return columns.finish(false);
      }
      // The latest `limit` inside the bounds: walk down from `to`, then turn the columns around.
      const page = this.raw<SampleRow>(
        `SELECT t, value, quality FROM samples WHERE tag_id = ? AND t >= ? AND t < ?${good}
         ORDER BY t DESC LIMIT ?`,
      );
      let upper = to;
      let remaining = limit;
      while (remaining > 0) {
        const want = Math.min(READ_PAGE, remaining);
        const rows = page.all(tagId, from, upper, want);
        appendRows(columns, rows);
        remaining -= rows.length;
        if (rows.length < want) break;
        upper = columns.lastTime();
      }
      return columns.finish(true);
    });
  }

  countSamples(tag?: string): Promise<number> {
    return this.call(() => {
      if (tag === undefined) {
        return this.stmt<number>('SELECT count(*) FROM samples').pluck().get() ?? 0;
      }
      const tagId = this.lookupTagId(tag);
      if (tagId === undefined) return 0;
      return (
        this.stmt<number>('SELECT count(*) FROM samples WHERE tag_id = ?').pluck().get(tagId) ?? 0
      );
    });
  }

  samplesAfter(afterSeq: number, limit: number, shard?: number): Promise<StoredSample[]> {
    return this.call(() => {
      if (shard !== undefined && shard !== 0) {
        throw new TrueshiftError(
          'INVALID_ARGUMENT',
          `A SQLite store has one shard (0); shard ${shard} does not exist.`,
        );
      }
      const rows = this.raw<StoredSampleRow>(
        // CROSS JOIN fixes the loop order: walk samples by seq, look each tag up by id.
        `SELECT s.seq, g.name, s.t, s.value, s.quality
           FROM samples s CROSS JOIN tags g ON g.id = s.tag_id
          WHERE s.seq > ? ORDER BY s.seq LIMIT ?`,
      ).all(afterSeq, limitOf(limit, 'samplesAfter'));
      return rows.map(([seq, tag, t, value, quality]) => ({ seq, tag, t, value, quality }));
    });
  }

  lastSeq(): Promise<number> {
    return this.call(() => this.lastSeqNow());
  }

  // ---- quarantine ----

  quarantine(entries: readonly QuarantineInput[]): Promise<void> {
    return this.call(() => {
      this.write(() => {
        for (const entry of entries) this.quarantineOne(entry);
      });
    });
  }

  listQuarantine(
    options: { limit?: number; beforeId?: number; source?: string } = {},
  ): Promise<QuarantineEntry[]> {
    return this.call(() =>
      this.listNewestFirst<QuarantineRow>(
        'quarantine',
        { 'id < ?': options.beforeId, 'source = ?': options.source },
        options.limit,
        'listQuarantine',
      ).map((row) => quarantineFromRow(row, row.raw)),
    );
  }

  countQuarantine(): Promise<number> {
    return this.call(() => this.stmt<number>('SELECT count(*) FROM quarantine').pluck().get() ?? 0);
  }

  // ---- marks ----

  createMark(mark: MarkInput, by: string, now: number): Promise<MarkRecord> {
    return this.call(() => {
      checkMarkTags(mark.tags);
      const record = newMarkRecord(mark, randomUUID(), now);
      return this.write(() => {
        this.stmt(
          `INSERT INTO marks (id, at, label, note, direction, smallest_shift, n_before, n_after_cap,
                              risk_level, settling_ms, created_at, updated_at, withdrawn_at, revision)
           VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)`,
        ).run(
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
        );
        this.writeMarkTags(record, now);
        this.addRevision(record, now, by, 'created', '');
        return record;
      });
    });
  }

  correctMark(
    id: string,
    patch: Partial<MarkInput>,
    by: string,
    reason: string,
    now: number,
  ): Promise<MarkRecord> {
    return this.call(() => {
      if (patch.tags !== undefined) checkMarkTags(patch.tags);
      return this.write(() => {
        const current = this.changeableMark(id);
        const record = correctedMarkRecord(current, patch, now);
        this.stmt(
          `UPDATE marks SET at = ?, label = ?, note = ?, direction = ?, smallest_shift = ?,
                            n_before = ?, n_after_cap = ?, risk_level = ?, settling_ms = ?,
                            updated_at = ?, revision = ?
           WHERE id = ?`,
        ).run(
          record.at,
          record.label,
          record.note,
          record.direction,
          record.smallestShift,
          record.nBefore,
          record.nAfterCap,
          record.riskLevel,
          record.settlingMs,
          record.updatedAt,
          record.revision,
          record.id,
        );
        if (patch.tags !== undefined) {
          this.stmt('DELETE FROM mark_tags WHERE mark_id = ?').run(id);
          this.writeMarkTags(record, now);
        }
        this.addRevision(record, now, by, 'corrected', reason);
        return record;
      });
    });
  }

  withdrawMark(id: string, by: string, reason: string, now: number): Promise<MarkRecord> {
    return this.call(() =>
      this.write(() => {
        const current = this.changeableMark(id);
        const record: MarkRecord = {
          ...current,
          withdrawnAt: now,
          updatedAt: now,
          revision: current.revision + 1,
        };
        this.stmt(
          'UPDATE marks SET withdrawn_at = ?, updated_at = ?, revision = ? WHERE id = ?',
        ).run(record.withdrawnAt, record.updatedAt, record.revision, id);
        this.addRevision(record, now, by, 'withdrawn', reason);
        return record;
      }),
    );
  }

  getMark(id: string): Promise<MarkRecord | null> {
    return this.call(() => this.markNow(id) ?? null);
  }

  listMarks(options: { tag?: string; includeWithdrawn?: boolean } = {}): Promise<MarkRecord[]> {
    return this.call(() => {
      const where: string[] = [];
      const params: unknown[] = [];
      if (options.tag !== undefined) {
        const tagId = this.lookupTagId(options.tag);
        if (tagId === undefined) return [];
        where.push('EXISTS (SELECT 1 FROM mark_tags mt WHERE mt.mark_id = m.id AND mt.tag_id = ?)');
        params.push(tagId);
      }
      if (options.includeWithdrawn !== true) where.push('m.withdrawn_at IS NULL');
      const sql = `${MARK_SELECT} ${where.length > 0 ? `WHERE ${where.join(' AND ')}` : ''}
                   ORDER BY m.at, m.created_at, m.id`;
      return this.stmt<MarkRow>(sql)
        .all(...params)
        .map((row) => markFromRow(row, parseJson(row.tags) as string[]));
    });
  }

  markHistory(id: string): Promise<MarkRevision[]> {
    return this.call(() =>
      this.stmt<MarkRevisionRow>('SELECT * FROM mark_revisions WHERE mark_id = ? ORDER BY revision')
        .all(id)
        .map(markRevisionFromRow),
    );
  }

  // ---- evidence ----

  addEvidenceSnapshot(snapshot: EvidenceSnapshotInput): Promise<EvidenceSnapshot> {
    return this.call(() =>
      this.write(() => {
        this.requireMark(snapshot.markId);
        const info = this.stmt(
          `INSERT INTO evidence_snapshots (mark_id, tag, sample_time, evaluated_at, n_after, risk,
                                           verdict, body)
           VALUES (?, ?, ?, ?, ?, ?, ?, ?)`,
        ).run(
          snapshot.markId,
          snapshot.tag,
          snapshot.sampleTime,
          snapshot.evaluatedAt,
          snapshot.nAfter,
          snapshot.risk,
          snapshot.verdict,
          toJson(snapshot.body),
        );
        return { ...snapshot, id: Number(info.lastInsertRowid) };
      }),
    );
  }

  listEvidenceSnapshots(
    markId: string,
    tag: string,
    options: { limit?: number } = {},
  ): Promise<EvidenceSnapshot[]> {
    return this.call(() =>
      // The latest `limit` evaluations, handed back in the order they were made.
      this.stmt<EvidenceRow>(
        `SELECT * FROM (
           SELECT * FROM evidence_snapshots WHERE mark_id = ? AND tag = ?
           ORDER BY evaluated_at DESC, id DESC LIMIT ?)
         ORDER BY evaluated_at, id`,
      )
        .all(markId, tag, limitOf(options.limit, 'listEvidenceSnapshots'))
        .map(evidenceFromRow),
    );
  }

  latestEvidence(markId: string, tag: string): Promise<EvidenceSnapshot | null> {
    return this.call(() => {
      const row = this.stmt<EvidenceRow>(
        `SELECT * FROM evidence_snapshots WHERE mark_id = ? AND tag = ?
         ORDER BY evaluated_at DESC, id DESC LIMIT 1`,
      ).get(markId, tag);
      return row === undefined ? null : evidenceFromRow(row);
    });
  }

  // ---- alerts ----

  raiseAlert(alert: AlertInput, outbox: readonly OutboxTarget[]): Promise<AlertChange> {
    return this.call(() =>
      this.write((): AlertChange => {
        if (alert.markId !== null) this.requireMark(alert.markId);
        const open = this.stmt<AlertRow>(
          `SELECT * FROM alerts WHERE dedupe_key = ? AND state <> 'cleared'`,
        ).get(alert.dedupeKey);
        if (open !== undefined) {
          // A repeat is news to nobody outside: it updates the record and sends nothing.
          this.stmt(
            'UPDATE alerts SET repeats = repeats + 1, updated_at = ?, evidence = ? WHERE id = ?',
          ).run(alert.at, toJson(alert.evidence), open.id);
          return { alert: this.alertNow(open.id), change: 'repeated' };
        }
        const info = this.stmt(
          `INSERT INTO alerts (tag, mark_id, kind, dedupe_key, title, state, opened_at, updated_at,
                               repeats, evidence)
           VALUES (?, ?, ?, ?, ?, 'open', ?, ?, 0, ?)`,
        ).run(
          alert.tag,
          alert.markId,
          alert.kind,
          alert.dedupeKey,
          alert.title,
          alert.at,
          alert.at,
          toJson(alert.evidence),
        );
        return this.announce(
          { alert: this.alertNow(Number(info.lastInsertRowid)), change: 'opened' },
          outbox,
        );
      }),
    );
  }

  acknowledgeAlert(
    id: number,
    by: string,
    note: string,
    now: number,
    outbox: readonly OutboxTarget[],
  ): Promise<AlertChange> {
    return this.call(() =>
      this.write((): AlertChange => {
        const current = this.changeableAlert(id);
        // Acknowledging twice (a retried request, two people at once) is answered, not re-sent.
        if (current.state === 'acknowledged') return { alert: current, change: 'acknowledged' };
        this.stmt(
          `UPDATE alerts SET state = 'acknowledged', acknowledged_at = ?, acknowledged_by = ?,
                             note = ?, updated_at = ?
           WHERE id = ?`,
        ).run(now, by, note, now, id);
        return this.announce({ alert: this.alertNow(id), change: 'acknowledged' }, outbox);
      }),
    );
  }

  clearAlert(
    id: number,
    now: number,
    outbox: readonly OutboxTarget[],
    note?: string,
  ): Promise<AlertChange> {
    return this.call(() =>
      this.write((): AlertChange => {
        this.changeableAlert(id);
        this.stmt(
          `UPDATE alerts SET state = 'cleared', cleared_at = ?, updated_at = ?,
             note = COALESCE(?, note) WHERE id = ?`,
        ).run(now, now, note ?? null, id);
        return this.announce({ alert: this.alertNow(id), change: 'cleared' }, outbox);
      }),
    );
  }

  getAlert(id: number): Promise<AlertRecord | null> {
    return this.call(() => {
      const row = this.stmt<AlertRow>('SELECT * FROM alerts WHERE id = ?').get(id);
      return row === undefined ? null : alertFromRow(row);
    });
  }

  listAlerts(
    options: { state?: AlertState; tag?: string; limit?: number } = {},
  ): Promise<AlertRecord[]> {
    return this.call(() =>
      this.listNewestFirst<AlertRow>(
        'alerts',
        { 'state = ?': options.state, 'tag = ?': options.tag },
        options.limit,
        'listAlerts',
      ).map(alertFromRow),
    );
  }

  // ---- outbox ----

  enqueueOutbox(entries: readonly OutboxInput[]): Promise<void> {
    return this.call(() => {
      this.write(() => {
        this.enqueueNow(entries);
      });
    });
  }

  dueOutbox(now: number, limit: number): Promise<OutboxRecord[]> {
    return this.call(() =>
      this.stmt<OutboxRow>(
        `SELECT * FROM outbox WHERE state = 'pending' AND next_attempt_at <= ?
         ORDER BY id LIMIT ?`,
      )
        .all(now, limitOf(limit, 'dueOutbox'))
        .map(outboxFromRow),
    );
  }

  markDelivered(id: number, now: number): Promise<void> {
    return this.call(() => {
      // A late second success must not move the first delivery time.
      this.stmt(
        `UPDATE outbox SET state = 'delivered', delivered_at = ? WHERE id = ? AND state <> 'delivered'`,
      ).run(now, id);
    });
  }

  markAttemptFailed(
    id: number,
    error: string,
    nextAttemptAt: number,
    dead: boolean,
  ): Promise<void> {
    return this.call(() => {
      // Only a pending entry can fail: a slow attempt reporting after a delivery changes nothing.
      this.stmt(
        `UPDATE outbox SET attempts = attempts + 1, last_error = ?, next_attempt_at = ?, state = ?
         WHERE id = ? AND state = 'pending'`,
      ).run(cutUtf8(error), nextAttemptAt, dead ? 'dead' : 'pending', id);
    });
  }

  listOutbox(options: { state?: OutboxState; limit?: number } = {}): Promise<OutboxRecord[]> {
    return this.call(() =>
      this.listNewestFirst<OutboxRow>(
        'outbox',
        { 'state = ?': options.state },
        options.limit,
        'listOutbox',
      ).map(outboxFromRow),
    );
  }

  // ---- analyser state ----

  saveAnalyserState(records: readonly AnalyserStateRecord[], fence?: LeaseFence): Promise<void> {
    return this.call(() => {
      if (fence !== undefined) {
        throw new TrueshiftError('LEASE_LOST', 'A SQLite store holds no leases.');
      }
      this.write(() => {
        const upsert = this.stmt(
          `INSERT INTO analyser_state (key, state, last_seq, updated_at) VALUES (?, ?, ?, ?)
           ON CONFLICT (key) DO UPDATE SET
             state = excluded.state, last_seq = excluded.last_seq, updated_at = excluded.updated_at`,
        );
        for (const record of records) {
          upsert.run(record.key, toJson(record.state), record.lastSeq, record.updatedAt);
        }
      });
    });
  }

  loadAnalyserState(key: string): Promise<AnalyserStateRecord | null> {
    return this.call(() => {
      const row = this.stmt<AnalyserStateRow>('SELECT * FROM analyser_state WHERE key = ?').get(
        key,
      );
      return row === undefined ? null : analyserStateFromRow(row);
    });
  }

  listAnalyserState(prefix = ''): Promise<AnalyserStateRecord[]> {
    return this.call(() =>
      // `key >= prefix` lets the primary key start the scan; substr decides the match exactly.
      this.stmt<AnalyserStateRow>(
        `SELECT * FROM analyser_state
          WHERE key >= @prefix AND substr(key, 1, length(@prefix)) = @prefix
          ORDER BY key`,
      )
        .all({ prefix })
        .map(analyserStateFromRow),
    );
  }

  // ---- files ----

  recordFile(file: FileRecord): Promise<boolean> {
    return this.call(
      () =>
        this.stmt(
          `INSERT INTO files (hash, name, taken_at, summary) VALUES (?, ?, ?, ?)
           ON CONFLICT (hash) DO NOTHING`,
        ).run(file.hash, file.name, file.takenAt, toJson(file.summary)).changes === 1,
    );
  }

  countOutbox(): Promise<Record<OutboxState, number>> {
    return this.call(() => {
      const counts: Record<OutboxState, number> = { pending: 0, delivered: 0, dead: 0 };
      const rows = this.stmt<{ state: OutboxState; n: number }>(
        'SELECT state, count(*) AS n FROM outbox GROUP BY state',
      ).all();
      for (const row of rows) counts[row.state] = row.n;
      return counts;
    });
  }

  // ---- tokens ----

  createToken(token: TokenInput): Promise<TokenRecord> {
    return this.call(() => {
      this.stmt(
        `INSERT INTO tokens (id, name, hash, scopes, created_at, revoked_at)
         VALUES (?, ?, ?, ?, ?, NULL)`,
      ).run(token.id, token.name, token.hash, JSON.stringify(token.scopes), token.createdAt);
      return { ...token, scopes: [...token.scopes], revokedAt: null };
    });
  }

  findTokenByHash(hash: string): Promise<TokenRecord | null> {
    return this.call(() => {
      const row = this.stmt<TokenRow>('SELECT * FROM tokens WHERE hash = ?').get(hash);
      return row === undefined ? null : tokenFromRow(row);
    });
  }

  listTokens(): Promise<TokenRecord[]> {
    return this.call(() =>
      this.stmt<TokenRow>('SELECT * FROM tokens ORDER BY created_at, id').all().map(tokenFromRow),
    );
  }

  revokeToken(id: string, now: number): Promise<TokenRecord> {
    return this.call(() =>
      this.write(() => {
        this.stmt('UPDATE tokens SET revoked_at = ? WHERE id = ? AND revoked_at IS NULL').run(
          now,
          id,
        );
        const row = this.stmt<TokenRow>('SELECT * FROM tokens WHERE id = ?').get(id);
        if (row === undefined) throw new TrueshiftError('TOKEN_NOT_FOUND', `Token ${id}.`);
        return tokenFromRow(row);
      }),
    );
  }

  // ---- inside ----

  /** Runs synchronous work as a promise, so a throw becomes a rejection. */
  private call<T>(work: () => T): Promise<T> {
    return new Promise<T>((resolve) => {
      resolve(work());
    });
  }

  /**
   * One IMMEDIATE transaction: the write lock is taken at BEGIN, so reads made inside to decide
   * what to write (max seq, the open alert) cannot go stale before the commit.
   */
  private write<T>(work: () => T): T {
    try {
      return this.db.transaction(work).immediate();
    } catch (error) {
      // Tags created by the rolled-back transaction are gone again; so must their cached ids be.
      this.tagIds.clear();
      throw error;
    }
  }

  /**
   * The newest rows of a listing table. `filters` maps a condition with one placeholder to its
   * value; one left undefined is left out of the SQL, so each combination of given filters gets
   * its own cached statement.
   */
  private listNewestFirst<R>(
    table: 'quarantine' | 'alerts' | 'outbox',
    filters: Readonly<Record<string, unknown>>,
    limit: number | undefined,
    what: string,
  ): R[] {
    const given = Object.entries(filters).filter(([, value]) => value !== undefined);
    const where =
      given.length > 0 ? `WHERE ${given.map(([condition]) => condition).join(' AND ')} ` : '';
    return this.stmt<R>(`SELECT * FROM ${table} ${where}ORDER BY id DESC LIMIT ?`).all(
      ...given.map(([, value]) => value),
      limitOf(limit, what),
    );
  }

  private stmt<R = unknown>(sql: string): Database.Statement<unknown[], R> {
    let statement = this.statements.get(sql);
    if (statement === undefined) {
      statement = this.db.prepare(sql);
      this.statements.set(sql, statement);
    }
    // `pluck()` on a shared statement is idempotent here: a given SQL text is always used one way.
    return statement as Database.Statement<unknown[], R>;
  }

  /** A cached statement in raw mode: rows come back as arrays, with no object per row. */
  private raw<R extends unknown[]>(sql: string): Database.Statement<unknown[], R> {
    let statement = this.rawStatements.get(sql);
    if (statement === undefined) {
      statement = this.db.prepare<unknown[], unknown[]>(sql).raw(true);
      this.rawStatements.set(sql, statement);
    }
    return statement as Database.Statement<unknown[], R>;
  }

  private lastSeqNow(): number {
    return this.stmt<number | null>('SELECT max(seq) FROM samples').pluck().get() ?? 0;
  }

  private tagRow(name: string): TagRow | undefined {
    return this.stmt<TagRow>('SELECT * FROM tags WHERE name = ?').get(name);
  }

  private lookupTagId(name: string): number | undefined {
    const cached = this.tagIds.get(name);
    if (cached !== undefined) return cached;
    const id = this.stmt<number>('SELECT id FROM tags WHERE name = ?').pluck().get(name);
    if (id !== undefined) this.tagIds.set(name, id);
    return id;
  }

  /** The tag's id, creating the tag with default settings first if it is new. Inside `write`. */
  private tagId(name: string, now: number): number {
    const known = this.lookupTagId(name);
    if (known !== undefined) return known;
    const info = this.stmt(
      `INSERT INTO tags (name, better, settings, created_at, updated_at)
       VALUES (?, 'either', '{}', ?, ?)`,
    ).run(name, now, now);
    const id = Number(info.lastInsertRowid);
    this.tagIds.set(name, id);
    return id;
  }

  private quarantineOne(entry: QuarantineInput): void {
    this.stmt(
      `INSERT INTO quarantine (source, raw, reason, code, tag, received_at)
       VALUES (?, ?, ?, ?, ?, ?)`,
    ).run(
      entry.source,
      cutUtf8(entry.raw),
      entry.reason,
      entry.code,
      entry.tag ?? null,
      entry.receivedAt,
    );
  }

  private markNow(id: string): MarkRecord | undefined {
    const row = this.stmt<MarkRow>(`${MARK_SELECT} WHERE m.id = ?`).get(id);
    return row === undefined ? undefined : markFromRow(row, parseJson(row.tags) as string[]);
  }

  private requireMark(id: string): MarkRecord {
    return existingMark(this.markNow(id), id);
  }

  private changeableMark(id: string): MarkRecord {
    return changeableMark(this.markNow(id), id);
  }

  private writeMarkTags(mark: MarkRecord, now: number): void {
    const insert = this.stmt('INSERT INTO mark_tags (mark_id, position, tag_id) VALUES (?, ?, ?)');
    mark.tags.forEach((tag, position) => {
      insert.run(mark.id, position, this.tagId(tag, now));
    });
  }

  private addRevision(
    mark: MarkRecord,
    now: number,
    by: string,
    action: MarkRevision['action'],
    reason: string,
  ): void {
    this.stmt(
      `INSERT INTO mark_revisions (mark_id, revision, changed_at, changed_by, action, reason, mark)
       VALUES (?, ?, ?, ?, ?, ?, ?)`,
    ).run(mark.id, mark.revision, now, by, action, reason, JSON.stringify(mark));
  }

  private alertNow(id: number): AlertRecord {
    const row = this.stmt<AlertRow>('SELECT * FROM alerts WHERE id = ?').get(id);
    if (row === undefined) throw new TrueshiftError('ALERT_NOT_FOUND', `Alert ${id}.`);
    return alertFromRow(row);
  }

  private changeableAlert(id: number): AlertRecord {
    return changeableAlert(this.alertNow(id));
  }

  /** Queues the change for every target in the caller's transaction: saved together or not at all. */
  private announce(change: AlertChange, targets: readonly OutboxTarget[]): AlertChange {
    this.enqueueNow(announcements(change, targets));
    return change;
  }

  private enqueueNow(entries: readonly OutboxInput[]): void {
    const insert = this.stmt(
      `INSERT INTO outbox (channel, target, idempotency_key, payload, created_at, state, attempts,
                           next_attempt_at)
       VALUES (?, ?, ?, ?, ?, 'pending', 0, ?)
       ON CONFLICT (channel, target, idempotency_key) DO NOTHING`,
    );
    for (const entry of entries) {
      insert.run(
        entry.channel,
        entry.target,
        entry.idempotencyKey,
        toJson(entry.payload),
        entry.createdAt,
        entry.createdAt,
      );
    }
  }
}

export function openSqliteStore(options: SqliteStoreOptions): SqliteStore {
  return new SqliteStore(options);
}
