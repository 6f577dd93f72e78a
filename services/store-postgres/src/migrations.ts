import type pg from 'pg';
import { TrueshiftError } from '@trueshift/errors';
import { pendingMigrations } from '@trueshift/store';
import type { Migration } from '@trueshift/store';

/**
 * The schema, one numbered step at a time. A step, once released, never changes: the database
 * remembers which steps it has, so new columns or tables go in a new step at the end.
 *
 * Text that is compared or sorted (names, keys, ids) is COLLATE "C": byte order, the same as the
 * SQLite backend's, and independent of the database's locale.
 */
export const migrations: readonly Migration[] = [
  {
    version: 1,
    name: 'initial schema',
    sql: `
      CREATE TABLE store_meta (
        key text COLLATE "C" PRIMARY KEY,
        value text NOT NULL
      );

      -- The shard is fixed when the tag is created, from its name and the store's shard count.
      CREATE TABLE tags (
        id integer GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
        name text COLLATE "C" NOT NULL UNIQUE,
        shard smallint NOT NULL,
        unit text,
        description text,
        better text NOT NULL CHECK (better IN ('higher', 'lower', 'either')),
        valid_min double precision,
        valid_max double precision,
        settings text NOT NULL,
        created_at bigint NOT NULL,
        updated_at bigint NOT NULL
      );

      CREATE SEQUENCE samples_seq AS bigint;

      -- No foreign key to tags: every tag_id comes from the tags table in the writing transaction
      -- and tags are never deleted, so a per-row check would only slow down bulk ingest.
      CREATE TABLE samples (
        tag_id integer NOT NULL,
        t bigint NOT NULL,
        value double precision,
        quality integer NOT NULL,
        seq bigint NOT NULL,
        shard smallint NOT NULL,
        PRIMARY KEY (tag_id, t)
      );
      CREATE UNIQUE INDEX samples_by_seq ON samples (seq);
      CREATE INDEX samples_by_shard_seq ON samples (shard, seq);

      -- raw is the payload's UTF-8 bytes: a payload may hold NUL, which text columns refuse.
      CREATE TABLE quarantine (
        id bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
        source text COLLATE "C" NOT NULL,
        raw bytea NOT NULL,
        reason text NOT NULL,
        code text NOT NULL,
        tag text,
        received_at bigint NOT NULL
      );
      CREATE INDEX quarantine_by_source ON quarantine (source, id);

      CREATE TABLE marks (
        id text COLLATE "C" PRIMARY KEY,
        at bigint NOT NULL,
        label text NOT NULL,
        note text NOT NULL,
        direction text NOT NULL CHECK (direction IN ('rise', 'fall', 'either')),
        smallest_shift double precision,
        n_before double precision,
        n_after_cap double precision,
        risk_level double precision,
        settling_ms double precision,
        created_at bigint NOT NULL,
        updated_at bigint NOT NULL,
        withdrawn_at bigint,
        revision integer NOT NULL
      );

      CREATE TABLE mark_tags (
        mark_id text COLLATE "C" NOT NULL REFERENCES marks (id),
        position integer NOT NULL,
        tag_id integer NOT NULL REFERENCES tags (id),
        PRIMARY KEY (mark_id, position),
        UNIQUE (tag_id, mark_id)
      );

      CREATE TABLE mark_revisions (
        mark_id text COLLATE "C" NOT NULL REFERENCES marks (id),
        revision integer NOT NULL,
        changed_at bigint NOT NULL,
        changed_by text NOT NULL,
        action text NOT NULL CHECK (action IN ('created', 'corrected', 'withdrawn')),
        reason text NOT NULL,
        mark text NOT NULL,
        PRIMARY KEY (mark_id, revision)
      );

      CREATE TABLE evidence_snapshots (
        id bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
        mark_id text COLLATE "C" NOT NULL REFERENCES marks (id),
        tag text COLLATE "C" NOT NULL,
        sample_time bigint NOT NULL,
        evaluated_at bigint NOT NULL,
        n_after bigint NOT NULL,
        risk double precision,
        verdict text NOT NULL,
        body text NOT NULL
      );
      CREATE INDEX evidence_by_mark_tag ON evidence_snapshots (mark_id, tag, evaluated_at, id);

      -- Identity values are never handed out twice: alert ids leave the plant in outbox
      -- idempotency keys.
      CREATE TABLE alerts (
        id bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
        tag text COLLATE "C" NOT NULL,
        mark_id text COLLATE "C" REFERENCES marks (id),
        kind text NOT NULL
          CHECK (kind IN ('credible-shift', 'unmarked-shift', 'stale', 'stuck', 'out-of-range')),
        dedupe_key text COLLATE "C" NOT NULL,
        title text NOT NULL,
        state text NOT NULL CHECK (state IN ('open', 'acknowledged', 'cleared')),
        opened_at bigint NOT NULL,
        updated_at bigint NOT NULL,
        repeats integer NOT NULL,
        acknowledged_at bigint,
        acknowledged_by text,
        note text,
        cleared_at bigint,
        evidence text NOT NULL
      );
      CREATE UNIQUE INDEX alerts_uncleared_by_dedupe_key ON alerts (dedupe_key)
        WHERE state <> 'cleared';
      CREATE INDEX alerts_by_tag ON alerts (tag, id);

      CREATE TABLE outbox (
        id bigint GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
        channel text NOT NULL CHECK (channel IN ('webhook', 'mqtt')),
        target text COLLATE "C" NOT NULL,
        idempotency_key text COLLATE "C" NOT NULL,
        payload text NOT NULL,
        created_at bigint NOT NULL,
        state text NOT NULL CHECK (state IN ('pending', 'delivered', 'dead')),
        attempts integer NOT NULL,
        next_attempt_at bigint NOT NULL,
        last_error text,
        delivered_at bigint,
        UNIQUE (channel, target, idempotency_key)
      );
      CREATE INDEX outbox_due ON outbox (next_attempt_at, id) WHERE state = 'pending';

      CREATE TABLE analyser_state (
        key text COLLATE "C" PRIMARY KEY,
        state text NOT NULL,
        last_seq bigint NOT NULL,
        updated_at bigint NOT NULL
      );

      CREATE TABLE files (
        hash text COLLATE "C" PRIMARY KEY,
        name text NOT NULL,
        taken_at bigint NOT NULL,
        summary text NOT NULL
      );

      -- Only the SHA-256 of each secret is kept; the unique index is how a request's token is found.
      CREATE TABLE tokens (
        id text COLLATE "C" PRIMARY KEY,
        name text NOT NULL,
        hash text COLLATE "C" NOT NULL UNIQUE,
        scopes text NOT NULL,
        created_at bigint NOT NULL,
        revoked_at bigint
      );

      -- One row per shard, made when the store is set up; owner NULL means nobody holds it.
      CREATE TABLE leases (
        shard smallint PRIMARY KEY,
        owner text COLLATE "C",
        epoch bigint NOT NULL DEFAULT 0,
        expires_at bigint NOT NULL DEFAULT 0
      );

      CREATE TABLE instances (
        id text COLLATE "C" PRIMARY KEY,
        alive_until bigint NOT NULL,
        -- Which process speaks under the name, so a second one started under it is refused.
        incarnation text NOT NULL DEFAULT ''
      );
    `,
  },
];

/** The first key of every advisory lock of a schema: its own, so schemas never wait on each other. */
export function lockKey(schema: string): number {
  let hash = 0x811c9dc5;
  const text = `trueshift:${schema}`;
  for (let i = 0; i < text.length; i++) {
    hash ^= text.charCodeAt(i);
    hash = Math.imul(hash, 0x01000193) >>> 0;
  }
  return hash | 0;
}

/** The second lock key of schema set-up; shard locks use the shard number, which is never < 0. */
export const MIGRATION_LOCK = -1;

/**
 * Creates the schema if need be, brings it up to the newest step and checks the shard count, in
 * one transaction under an advisory lock: instances starting at once take turns, and a failing step
 * leaves the database as it was. Returns the versions applied now.
 */
export async function applyMigrations(
  client: pg.ClientBase,
  schema: string,
  shards: number,
  steps: readonly Migration[] = migrations,
): Promise<number[]> {
  await client.query('BEGIN');
  try {
    await client.query('SELECT pg_advisory_xact_lock($1, $2)', [lockKey(schema), MIGRATION_LOCK]);
    await client.query(`CREATE SCHEMA IF NOT EXISTS "${schema}"`);
    // The connection's search_path names the schema already; set it again now that it exists.
    await client.query(`SET LOCAL search_path TO "${schema}"`);
    await client.query(`CREATE TABLE IF NOT EXISTS schema_migrations (
      version integer PRIMARY KEY,
      name text NOT NULL,
      applied_at bigint NOT NULL
    )`);
    const currentRow = await client.query<{ v: number | null }>(
      'SELECT max(version) AS v FROM schema_migrations',
    );
    const current = currentRow.rows[0]?.v ?? 0;
    const applied: number[] = [];
    for (const step of pendingMigrations(steps, current, `The database schema "${schema}"`)) {
      await client.query(step.sql);
      // Bookkeeping for whoever inspects the database, not a record time: the wall clock is fine.
      await client.query(
        'INSERT INTO schema_migrations (version, name, applied_at) VALUES ($1, $2, $3)',
        [step.version, step.name, Date.now()],
      );
      applied.push(step.version);
    }
    await setUpShards(client, shards);
    await client.query('COMMIT');
    return applied;
  } catch (error) {
    await client.query('ROLLBACK').catch(() => undefined);
    throw error;
  }
}

/** Records the shard count of a new store, or checks it against the one recorded. */
async function setUpShards(client: pg.ClientBase, shards: number): Promise<void> {
  await client.query(
    `INSERT INTO store_meta (key, value) VALUES ('shards', $1) ON CONFLICT (key) DO NOTHING`,
    [String(shards)],
  );
  const row = await client.query<{ value: string }>(
    `SELECT value FROM store_meta WHERE key = 'shards'`,
  );
  const recorded = Number(row.rows[0]?.value);
  if (recorded !== shards) {
    throw new TrueshiftError(
      'STORE_SHARDS_MISMATCH',
      `The database has ${recorded} shards; this instance was started with ${shards}.`,
    );
  }
  await client.query(
    `INSERT INTO leases (shard) SELECT s FROM generate_series(0, $1::integer - 1) AS s
     ON CONFLICT (shard) DO NOTHING`,
    [shards],
  );
}
