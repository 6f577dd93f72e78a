import type Database from 'better-sqlite3';
import { pendingMigrations } from '@trueshift/store';
import type { Migration } from '@trueshift/store';

/**
 * The schema, one numbered step at a time. A step, once released, never changes: a store file
 * remembers which steps it has, so new columns or tables go in a new step at the end.
 */
export const migrations: readonly Migration[] = [
  {
    version: 1,
    name: 'initial schema',
    sql: `
      CREATE TABLE tags (
        id INTEGER PRIMARY KEY,
        name TEXT NOT NULL UNIQUE,
        unit TEXT,
        description TEXT,
        better TEXT NOT NULL CHECK (better IN ('higher', 'lower', 'either')),
        valid_min REAL,
        valid_max REAL,
        settings TEXT NOT NULL,
        created_at INTEGER NOT NULL,
        updated_at INTEGER NOT NULL
      );

      -- Clustered on (tag, time): one tag's history is one contiguous range of the b-tree, which is
      -- the read analysis needs. Followers read by seq through the index instead.
      CREATE TABLE samples (
        tag_id INTEGER NOT NULL REFERENCES tags (id),
        t INTEGER NOT NULL,
        value REAL,
        quality INTEGER NOT NULL,
        seq INTEGER NOT NULL,
        PRIMARY KEY (tag_id, t)
      ) WITHOUT ROWID;
      CREATE UNIQUE INDEX samples_by_seq ON samples (seq);

      CREATE TABLE quarantine (
        id INTEGER PRIMARY KEY,
        source TEXT NOT NULL,
        raw TEXT NOT NULL,
        reason TEXT NOT NULL,
        code TEXT NOT NULL,
        tag TEXT,
        received_at INTEGER NOT NULL
      );
      CREATE INDEX quarantine_by_source ON quarantine (source, id);

      CREATE TABLE marks (
        id TEXT PRIMARY KEY,
        at INTEGER NOT NULL,
        label TEXT NOT NULL,
        note TEXT NOT NULL,
        direction TEXT NOT NULL CHECK (direction IN ('rise', 'fall', 'either')),
        smallest_shift REAL,
        n_before INTEGER,
        n_after_cap INTEGER,
        risk_level REAL,
        settling_ms INTEGER,
        created_at INTEGER NOT NULL,
        updated_at INTEGER NOT NULL,
        withdrawn_at INTEGER,
        revision INTEGER NOT NULL
      ) WITHOUT ROWID;

      CREATE TABLE mark_tags (
        mark_id TEXT NOT NULL REFERENCES marks (id),
        position INTEGER NOT NULL,
        tag_id INTEGER NOT NULL REFERENCES tags (id),
        PRIMARY KEY (mark_id, position),
        UNIQUE (tag_id, mark_id)
      ) WITHOUT ROWID;

      CREATE TABLE mark_revisions (
        mark_id TEXT NOT NULL REFERENCES marks (id),
        revision INTEGER NOT NULL,
        changed_at INTEGER NOT NULL,
        changed_by TEXT NOT NULL,
        action TEXT NOT NULL CHECK (action IN ('created', 'corrected', 'withdrawn')),
        reason TEXT NOT NULL,
        mark TEXT NOT NULL,
        PRIMARY KEY (mark_id, revision)
      ) WITHOUT ROWID;

      CREATE TABLE evidence_snapshots (
        id INTEGER PRIMARY KEY,
        mark_id TEXT NOT NULL REFERENCES marks (id),
        tag TEXT NOT NULL,
        sample_time INTEGER NOT NULL,
        evaluated_at INTEGER NOT NULL,
        n_after INTEGER NOT NULL,
        risk REAL,
        verdict TEXT NOT NULL,
        body TEXT NOT NULL
      );
      CREATE INDEX evidence_by_mark_tag ON evidence_snapshots (mark_id, tag, evaluated_at, id);

      -- AUTOINCREMENT: alert ids leave the plant in outbox idempotency keys, so an id must never be
      -- handed out twice, even after old alerts are deleted.
      CREATE TABLE alerts (
        id INTEGER PRIMARY KEY AUTOINCREMENT,
        tag TEXT NOT NULL,
        mark_id TEXT REFERENCES marks (id),
        kind TEXT NOT NULL
          CHECK (kind IN ('credible-shift', 'unmarked-shift', 'stale', 'stuck', 'out-of-range')),
        dedupe_key TEXT NOT NULL,
        title TEXT NOT NULL,
        state TEXT NOT NULL CHECK (state IN ('open', 'acknowledged', 'cleared')),
        opened_at INTEGER NOT NULL,
        updated_at INTEGER NOT NULL,
        repeats INTEGER NOT NULL,
        acknowledged_at INTEGER,
        acknowledged_by TEXT,
        note TEXT,
        cleared_at INTEGER,
        evidence TEXT NOT NULL
      );
      CREATE UNIQUE INDEX alerts_uncleared_by_dedupe_key ON alerts (dedupe_key)
        WHERE state <> 'cleared';
      CREATE INDEX alerts_by_tag ON alerts (tag, id);

      CREATE TABLE outbox (
        id INTEGER PRIMARY KEY,
        channel TEXT NOT NULL CHECK (channel IN ('webhook', 'mqtt')),
        target TEXT NOT NULL,
        idempotency_key TEXT NOT NULL,
        payload TEXT NOT NULL,
        created_at INTEGER NOT NULL,
        state TEXT NOT NULL CHECK (state IN ('pending', 'delivered', 'dead')),
        attempts INTEGER NOT NULL,
        next_attempt_at INTEGER NOT NULL,
        last_error TEXT,
        delivered_at INTEGER,
        UNIQUE (channel, target, idempotency_key)
      );
      CREATE INDEX outbox_due ON outbox (next_attempt_at) WHERE state = 'pending';

      CREATE TABLE analyser_state (
        key TEXT PRIMARY KEY,
        state TEXT NOT NULL,
        last_seq INTEGER NOT NULL,
        updated_at INTEGER NOT NULL
      ) WITHOUT ROWID;

      CREATE TABLE files (
        hash TEXT PRIMARY KEY,
        name TEXT NOT NULL,
        taken_at INTEGER NOT NULL,
        summary TEXT NOT NULL
      ) WITHOUT ROWID;
    `,
  },
  {
    version: 2,
    name: 'api tokens',
    sql: `
      -- Only the SHA-256 of each secret is kept; the unique index is how a request's token is found.
      CREATE TABLE tokens (
        id TEXT PRIMARY KEY,
        name TEXT NOT NULL,
        hash TEXT NOT NULL UNIQUE,
        scopes TEXT NOT NULL,
        created_at INTEGER NOT NULL,
        revoked_at INTEGER
      ) WITHOUT ROWID;
    `,
  },
];

/**
 * Brings the file up to the newest step. All pending steps run in one IMMEDIATE transaction, so two
 * processes opening the same new file cannot both apply a step, and a failing step leaves the file
 * as it was. Returns the versions applied now.
 */
export function applyMigrations(
  db: Database.Database,
  steps: readonly Migration[] = migrations,
): number[] {
  const run = db.transaction((): number[] => {
    db.exec(`CREATE TABLE IF NOT EXISTS schema_migrations (
      version INTEGER PRIMARY KEY,
      name TEXT NOT NULL,
      applied_at INTEGER NOT NULL
    )`);
    const current =
      db.prepare<[], number | null>('SELECT max(version) FROM schema_migrations').pluck().get() ??
      0;
    const record = db.prepare<[number, string, number]>(
      'INSERT INTO schema_migrations (version, name, applied_at) VALUES (?, ?, ?)',
    );
    const applied: number[] = [];
    for (const step of pendingMigrations(steps, current, 'The store file')) {
      db.exec(step.sql);
      // Bookkeeping for whoever inspects the file, not a record time, so the wall clock is fine.
      record.run(step.version, step.name, Date.now());
      applied.push(step.version);
    }
    return applied;
  });
  return run.immediate();
}
