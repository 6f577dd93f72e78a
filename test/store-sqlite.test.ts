import { spawn } from 'node:child_process';
import { mkdtemp, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import Database from 'better-sqlite3';
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { isTrueshiftError } from '@trueshift/errors';
import { applyMigrations, migrations, openSqliteStore } from '@trueshift/store-sqlite';
import type { SqliteStore } from '@trueshift/store-sqlite';
import { describeStoreContract } from './store-contract.js';

const root = fileURLToPath(new URL('..', import.meta.url));

async function tempDir(): Promise<string> {
  return mkdtemp(join(tmpdir(), 'trueshift-store-'));
}

describeStoreContract('SQLite file', async () => {
  const dir = await tempDir();
  const path = join(dir, 'store.db');
  return {
    store: openSqliteStore({ path }),
    reopen: () => Promise.resolve(openSqliteStore({ path })),
    cleanup: () => rm(dir, { recursive: true, force: true }),
  };
});

describe('SQLite store specifics', () => {
  let dir: string;
  let path: string;
  let store: SqliteStore | undefined;

  beforeEach(async () => {
    dir = await tempDir();
    path = join(dir, 'store.db');
  });

  afterEach(async () => {
    await store?.close();
    store = undefined;
    await rm(dir, { recursive: true, force: true });
  });

  it('runs in WAL mode with synchronous=NORMAL, foreign keys and a busy timeout', () => {
    store = openSqliteStore({ path, busyTimeoutMs: 1234 });
    const db = store.connection;
    expect(db.pragma('journal_mode', { simple: true })).toBe('wal');
    expect(db.pragma('synchronous', { simple: true })).toBe(1); // 1 = NORMAL
    expect(db.pragma('foreign_keys', { simple: true })).toBe(1);
    expect(db.pragma('busy_timeout', { simple: true })).toBe(1234);
  });

  it('applies migrations once: reopening leaves the schema and its records alone', async () => {
    store = openSqliteStore({ path });
    const applied = store.connection.prepare('SELECT * FROM schema_migrations').all();
    expect(applied).toEqual(
      migrations.map((m) => ({
        version: m.version,
        name: m.name,
        applied_at: expect.any(Number) as number,
      })),
    );
    const schema = store.connection
      .prepare('SELECT type, name, sql FROM sqlite_schema ORDER BY name')
      .all();
    await store.close();

    store = openSqliteStore({ path });
    expect(store.connection.prepare('SELECT * FROM schema_migrations').all()).toEqual(applied);
    expect(
      store.connection.prepare('SELECT type, name, sql FROM sqlite_schema ORDER BY name').all(),
    ).toEqual(schema);
    expect(applyMigrations(store.connection)).toEqual([]);
  });

  it('applies a new step on the next open, and a failing step not at all', () => {
    const db = new Database(path);
    try {
      expect(applyMigrations(db)).toEqual(migrations.map((m) => m.version));
      const next = migrations.length + 1;
      const added = [
        ...migrations,
        { version: next, name: 'notes', sql: 'CREATE TABLE notes (id INTEGER PRIMARY KEY)' },
      ];
      expect(applyMigrations(db, added)).toEqual([next]);
      expect(applyMigrations(db, added)).toEqual([]);

      const broken = [
        ...added,
        {
          version: next + 1,
          name: 'half',
          sql: 'CREATE TABLE half (id INTEGER); CREATE TABLE half (id INTEGER)',
        },
      ];
      expect(() => applyMigrations(db, broken)).toThrow(/already exists/);
      const tables = db
        .prepare("SELECT name FROM sqlite_schema WHERE name IN ('notes', 'half')")
        .pluck()
        .all();
      expect(tables).toEqual(['notes']);
      expect(db.prepare('SELECT max(version) FROM schema_migrations').pluck().get()).toBe(next);
    } finally {
      db.close();
    }
  });

  it('refuses a file written by a newer schema', () => {
    const db = new Database(path);
    applyMigrations(db, [...migrations, { version: 999, name: 'future', sql: 'SELECT 1' }]);
    db.close();
    let error: unknown;
    try {
      store = openSqliteStore({ path });
    } catch (caught) {
      error = caught;
    }
    expect(isTrueshiftError(error) ? error.code : error).toBe('INTERNAL');
  });

  it('follows by seq through the seq index and reads a tag by its primary key', () => {
    store = openSqliteStore({ path });
    const plan = (sql: string): string =>
      store?.connection
        .prepare(`EXPLAIN QUERY PLAN ${sql}`)
        .all()
        .map((row) => (row as { detail: string }).detail)
        .join('; ') ?? '';
    expect(
      plan(
        'SELECT s.seq, g.name FROM samples s CROSS JOIN tags g ON g.id = s.tag_id WHERE s.seq > 5 ORDER BY s.seq LIMIT 10',
      ),
    ).toMatch(/SEARCH s USING (COVERING )?INDEX samples_by_seq \(seq>\?\)/);
    expect(
      plan('SELECT t, value FROM samples WHERE tag_id = 1 AND t >= 0 AND t < 9 ORDER BY t'),
    ).toMatch(/SEARCH samples USING PRIMARY KEY \(tag_id=\? AND t>\? AND t<\?\)/);
  });

  it('keeps every batch the writer saw committed, and no part of any other, after SIGKILL', async () => {
    const batchSize = 2_000;
    const committed = await new Promise<number[]>((resolve, reject) => {
      const child = spawn(
        process.execPath,
        [
          '--import',
          'tsx',
          join(root, 'test/fixtures/store-crash-writer.ts'),
          path,
          String(batchSize),
        ],
        {
          cwd: root,
          env: { ...process.env, TSX_TSCONFIG_PATH: join(root, 'test/tsconfig.json') },
          stdio: ['ignore', 'pipe', 'pipe'],
        },
      );
      const seen: number[] = [];
      let pending = '';
      let stderr = '';
      child.stderr.on('data', (chunk: Buffer) => (stderr += chunk.toString()));
      child.stdout.on('data', (chunk: Buffer) => {
        pending += chunk.toString();
        const lines = pending.split('\n');
        pending = lines.pop() ?? '';
        for (const line of lines)
          seen.push(Number(/^committed (\d+)$/.exec(line)?.[1] ?? Number.NaN));
        // Killed while it is inside the next batch's transaction, most likely mid-write.
        if (seen.length >= 25) child.kill('SIGKILL');
      });
      child.on('error', reject);
      child.on('exit', (code, signal) => {
        if (signal === 'SIGKILL') resolve(seen);
        else
          reject(new Error(`writer exited with ${String(code)} before it was killed: ${stderr}`));
      });
    });
    expect(committed.slice(0, 25)).toEqual(Array.from({ length: 25 }, (_, i) => i));

    store = openSqliteStore({ path });
    const db = store.connection;
    expect(db.pragma('integrity_check', { simple: true })).toBe('ok');
    const perBatch = db
      // A bound JS number is a REAL in SQLite, so the divisor goes into the text for integer division.
      .prepare(
        `SELECT t / ${batchSize} AS batch, count(*) AS n FROM samples GROUP BY batch ORDER BY batch`,
      )
      .all() as { batch: number; n: number }[];
    // Every reported batch is whole; a batch the writer was killed in is whole or absent.
    const last = committed[committed.length - 1] ?? -1;
    expect(perBatch.length).toBeGreaterThanOrEqual(last + 1);
    expect(perBatch.length).toBeLessThanOrEqual(last + 2);
    perBatch.forEach((row, i) => {
      expect(row).toEqual({ batch: i, n: batchSize });
    });
    expect(await store.lastSeq()).toBe(perBatch.length * batchSize);
    // The store goes on where the writer stopped.
    const next = perBatch.length * batchSize;
    await store.writeSamples([
      { tag: 'crash-0', t: next, value: 1, quality: 192, source: 'test', receivedAt: next },
    ]);
    expect(await store.countSamples()).toBe(next + 1);
  });
});
