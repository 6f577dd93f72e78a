import { randomBytes } from 'node:crypto';
import pg from 'pg';
import { afterAll, afterEach, beforeAll, describe, expect, it } from 'vitest';
import { isTrueshiftError } from '@trueshift/errors';
import type { ErrorCode } from '@trueshift/errors';
import { shardOf } from '@trueshift/store';
import type { ClusterMessage, SampleInput } from '@trueshift/store';
import { migrations, openPostgresStore } from '@trueshift/store-postgres';
import type { PostgresStore, PostgresStoreOptions } from '@trueshift/store-postgres';
import { createTestDatabase } from './helpers/postgres.js';
import type { TestDatabase } from './helpers/postgres.js';
import { describeStoreContract } from './store-contract.js';

const SHARDS = 4;
const T0 = Date.UTC(2026, 2, 2, 6, 0, 0);

// Created in beforeAll: a database of this run's own, dropped with everything in it afterwards.
let db: TestDatabase;
let url: string;
let database: string;

let schemas = 0;
function freshSchema(): string {
  schemas++;
  return `s${schemas}_${randomBytes(3).toString('hex')}`;
}

/** Runs `work` on a connection of its own to the test database, as the superuser. */
async function admin<T>(work: (client: pg.Client) => Promise<T>): Promise<T> {
  const client = new pg.Client({ connectionString: url });
  await client.connect();
  try {
    return await work(client);
  } finally {
    await client.end();
  }
}

async function expectCode(promise: Promise<unknown>, code: ErrorCode): Promise<unknown> {
  const error: unknown = await promise.then(
    () => new Error(`expected ${code}, but it succeeded`),
    (caught: unknown) => caught,
  );
  expect(isTrueshiftError(error) ? error.code : error).toBe(code);
  return error;
}

/** Polls until `check` holds, failing after `ms`: network tests must end even when broken. */
async function eventually(check: () => boolean, ms = 5000): Promise<void> {
  const until = Date.now() + ms;
  while (!check()) {
    if (Date.now() > until) throw new Error(`condition not met within ${ms} ms`);
    await new Promise((resolve) => setTimeout(resolve, 20));
  }
}

function sample(tag: string, minute: number, value: number | null): SampleInput {
  return {
    tag,
    t: T0 + minute * 60_000,
    value,
    quality: 192,
    source: `test:${tag}`,
    receivedAt: T0 + minute * 60_000 + 500,
  };
}

beforeAll(async () => {
  db = await createTestDatabase('test');
  url = db.url;
  database = db.name;
});

afterAll(async () => {
  await db.drop();
});

describeStoreContract('PostgreSQL', async () => {
  const schema = freshSchema();
  const options: PostgresStoreOptions = { url, schema, shards: SHARDS, poolSize: 4 };
  return {
    store: await openPostgresStore(options),
    reopen: () => openPostgresStore(options),
    // Dropping a schema costs a few hundred ms of catalog work; the whole database goes in afterAll.
    cleanup: () => Promise.resolve(),
  };
});

describe('PostgreSQL store specifics', () => {
  const opened: PostgresStore[] = [];

  async function open(options: Partial<PostgresStoreOptions> & { schema: string }) {
    const store = await openPostgresStore({ url, shards: SHARDS, poolSize: 4, ...options });
    opened.push(store);
    return store;
  }

  afterEach(async () => {
    await Promise.all(opened.splice(0).map((store) => store.close()));
  });

  it('follows each shard without a gap or a repeat while two instances write at once', async () => {
    const schema = freshSchema();
    const writers = [await open({ schema }), await open({ schema })];
    const follower = await open({ schema });
    // Without the per-shard write lock this follower misses samples: a batch that took a lower seq
    // commits after one with a higher seq that the follower has already read past.
    // Tags shared by both writers (at different times) and tags of one writer only.
    const tags = Array.from({ length: 16 }, (_, i) => `line${i % 4}/unit${i}/flow`);
    const batches = 40;
    const written = new Set<string>();

    const write = async (w: number): Promise<void> => {
      for (let b = 0; b < batches; b++) {
        const batch = tags.map((tag, i) =>
          sample(`${tag}${i % 2 === 0 ? '' : `/w${w}`}`, b * 2 + w, b),
        );
        for (const s of batch) written.add(`${s.tag}@${s.t}`);
        const result = await writers[w]?.writeSamples(batch);
        expect(result?.inserted).toBe(batch.length);
      }
    };

    const seen = new Map<string, number>();
    const last = new Array<number>(SHARDS).fill(0);
    const follow = async (): Promise<number> => {
      let got = 0;
      for (let shard = 0; shard < SHARDS; shard++) {
        const part = await follower.samplesAfter(last[shard] ?? 0, 50, shard);
        for (const s of part) {
          expect(s.seq).toBeGreaterThan(last[shard] ?? 0);
          expect(shardOf(s.tag, SHARDS)).toBe(shard);
          last[shard] = s.seq;
          const key = `${s.tag}@${s.t}`;
          seen.set(key, (seen.get(key) ?? 0) + 1);
        }
        got += part.length;
      }
      return got;
    };

    const progress = { writing: true };
    const writing = Promise.all([write(0), write(1)]).finally(() => {
      progress.writing = false;
    });
    const deadline = Date.now() + 15_000;
    // Read while the writers commit; done after a pass that began once they had finished and
    // found nothing new.
    for (;;) {
      if (Date.now() > deadline) throw new Error('the follower did not catch up in 15 s');
      const wasWriting = progress.writing;
      const got = await follow();
      if (!wasWriting && got === 0) break;
    }
    await writing;

    expect(written.size).toBe(2 * batches * tags.length);
    expect(seen.size).toBe(written.size);
    expect([...seen.values()].every((count) => count === 1)).toBe(true);
    expect([...seen.keys()].every((key) => written.has(key))).toBe(true);
  });

  it('shares shards out by lease: claim, renew, expiry, epochs, fences and release', async () => {
    const schema = freshSchema();
    const a = await open({ schema, instance: 'a' });
    const b = await open({ schema, instance: 'b' });
    const now = T0;

    const first = await a.claimLeases(3, now, now + 10_000);
    expect(first).toEqual(
      [0, 1, 2].map((shard) => ({ shard, owner: 'a', epoch: 1, expiresAt: now + 10_000 })),
    );
    expect(await b.claimLeases(3, now, now + 10_000)).toEqual([
      { shard: 3, owner: 'b', epoch: 1, expiresAt: now + 10_000 },
    ]);
    expect(await b.claimLeases(3, now, now + 10_000)).toEqual([]);

    // Renewing touches only the caller's own leases.
    expect(
      (await a.renewLeases(now + 5_000, now + 20_000)).map((l) => [l.shard, l.expiresAt]),
    ).toEqual([
      [0, now + 20_000],
      [1, now + 20_000],
      [2, now + 20_000],
    ]);

    // b stops renewing; once its lease has run out, a takes shard 3 at a higher epoch.
    expect(await a.claimLeases(4, now + 9_999, now + 20_000)).toEqual([]);
    expect(await a.claimLeases(4, now + 10_000, now + 20_000)).toEqual([
      { shard: 3, owner: 'a', epoch: 2, expiresAt: now + 20_000 },
    ]);
    expect(await b.renewLeases(now + 10_001, now + 30_000)).toEqual([]);

    // b's analyser, not yet aware, saves under its old fence: refused, and nothing is kept.
    await expectCode(
      b.saveAnalyserState([{ key: 'line1', state: { n: 1 }, lastSeq: 5, updatedAt: now }], {
        shard: 3,
        owner: 'b',
        epoch: 1,
      }),
      'LEASE_LOST',
    );
    expect(await a.loadAnalyserState('line1')).toBeNull();
    await a.saveAnalyserState([{ key: 'line1', state: { n: 2 }, lastSeq: 6, updatedAt: now }], {
      shard: 3,
      owner: 'a',
      epoch: 2,
    });
    expect((await b.loadAnalyserState('line1'))?.state).toEqual({ n: 2 });

    // Releasing frees only one's own shard; the next claim raises the epoch again.
    await b.releaseLease(0);
    await a.releaseLease(3);
    expect((await a.listLeases()).map((l) => [l.shard, l.owner, l.epoch])).toEqual([
      [0, 'a', 1],
      [1, 'a', 1],
      [2, 'a', 1],
    ]);
    expect(await b.claimLeases(4, now + 11_000, now + 30_000)).toEqual([
      { shard: 3, owner: 'b', epoch: 3, expiresAt: now + 30_000 },
    ]);
  });

  it('gives every shard to exactly one of several instances claiming at once', async () => {
    const schema = freshSchema();
    const stores = await Promise.all(['x', 'y', 'z'].map((instance) => open({ schema, instance })));
    const taken = await Promise.all(
      stores.map((store) => store.claimLeases(SHARDS, T0, T0 + 1000)),
    );
    const shards = taken.flat().map((lease) => lease.shard);
    expect(shards.sort()).toEqual([0, 1, 2, 3]);
    expect(taken.flat().every((lease) => lease.epoch === 1)).toBe(true);
  });

  it('lists the instances alive at a time from their heartbeats', async () => {
    const schema = freshSchema();
    const a = await open({ schema, instance: 'a' });
    const b = await open({ schema, instance: 'b' });
    expect(await a.heartbeat(T0, T0 + 1000)).toEqual(['a']);
    expect(await b.heartbeat(T0, T0 + 5000)).toEqual(['a', 'b']);
    expect(await a.heartbeat(T0 + 900, T0 + 3000)).toEqual(['a', 'b']);
    // a's last beat ran out at T0 + 3000.
    expect(await b.heartbeat(T0 + 3000, T0 + 9000)).toEqual(['b']);
    expect(await a.heartbeat(T0 + 4000, T0 + 9000)).toEqual(['a', 'b']);
  });

  it('refuses a second process under a live instance name, and lets it in once that one is silent', async () => {
    const schema = freshSchema();
    const first = await open({ schema, instance: 'press-line' });
    const second = await open({ schema, instance: 'press-line' });
    expect(await first.heartbeat(T0, T0 + 1000)).toEqual(['press-line']);
    await expect(second.heartbeat(T0 + 500, T0 + 1500)).rejects.toMatchObject({
      code: 'INSTANCE_NAME_TAKEN',
    });
    // The first one's beat ran out at T0 + 1000 (a crash): the name is free for the newcomer.
    expect(await second.heartbeat(T0 + 1000, T0 + 2000)).toEqual(['press-line']);
    await expect(first.heartbeat(T0 + 1100, T0 + 2100)).rejects.toMatchObject({
      code: 'INSTANCE_NAME_TAKEN',
    });
  });

  it('carries committed changes to listening instances, and nothing malformed or rolled back', async () => {
    const schema = freshSchema();
    const a = await open({ schema, instance: 'a' });
    const b = await open({ schema, instance: 'b' });
    const elsewhere = await open({ schema: freshSchema(), instance: 'c' });
    const heard: ClusterMessage[] = [];
    const heardElsewhere: ClusterMessage[] = [];
    const stop = await a.listen((message) => heard.push(message));
    await elsewhere.listen((message) => heardElsewhere.push(message));

    await b.writeSamples([sample('evap1.steam', 0, 1), sample('evap1.brix', 0, 60)]);
    const mark = await b.createMark(
      { tags: ['evap1.steam'], at: T0, label: 'trap', direction: 'fall' },
      'ana',
      T0,
    );
    await b.correctMark(mark.id, { label: 'new trap' }, 'ana', 'typo', T0 + 1);
    const snapshot = await b.addEvidenceSnapshot({
      markId: mark.id,
      tag: 'evap1.steam',
      sampleTime: T0,
      evaluatedAt: T0,
      nAfter: 1,
      risk: null,
      verdict: 'still-gathering',
      body: {},
    });
    const alertInput = {
      tag: 'evap1.steam',
      markId: mark.id,
      kind: 'credible-shift' as const,
      dedupeKey: 'k',
      title: 'shift',
      at: T0,
      evidence: {},
    };
    const { alert } = await b.raiseAlert(alertInput, []);
    await b.raiseAlert({ ...alertInput, at: T0 + 1 }, []);
    // A change that rolls back must not be announced.
    await expect(
      b.raiseAlert({ ...alertInput, dedupeKey: 'other' }, [
        { channel: 'pigeon' as 'mqtt', target: 'loft', createdAt: T0 },
      ]),
    ).rejects.toThrow();
    await b.acknowledgeAlert(alert.id, 'ana', 'seen', T0 + 2, []);
    await b.clearAlert(alert.id, T0 + 3, []);
    await b.withdrawMark(mark.id, 'ana', 'wrong', T0 + 4);
    // Anyone can notify the channel: junk is dropped, and the connection keeps listening.
    await admin(async (client) => {
      for (const junk of [
        'not json',
        '{"kind":"samples","shards":"all"}',
        '{"kind":"bogus"}',
        '[]',
      ]) {
        await client.query('SELECT pg_notify($1, $2)', [b.channel, junk]);
      }
    });
    await a.writeSamples([sample('evap1.steam', 1, 2)]);

    const steam = shardOf('evap1.steam', SHARDS);
    const shardsOfFirst = [...new Set([steam, shardOf('evap1.brix', SHARDS)])].sort();
    const expected: ClusterMessage[] = [
      { kind: 'samples', shards: shardsOfFirst },
      { kind: 'mark', origin: 'b', markId: mark.id, change: 'created' },
      { kind: 'mark', origin: 'b', markId: mark.id, change: 'corrected' },
      { kind: 'evidence', origin: 'b', snapshotId: snapshot.id },
      { kind: 'alert', origin: 'b', alertId: alert.id, change: 'opened' },
      { kind: 'alert', origin: 'b', alertId: alert.id, change: 'acknowledged' },
      { kind: 'alert', origin: 'b', alertId: alert.id, change: 'cleared' },
      { kind: 'mark', origin: 'b', markId: mark.id, change: 'withdrawn' },
      // Its own messages reach an instance too.
      { kind: 'samples', shards: [steam] },
    ];
    await eventually(() => heard.length >= expected.length);
    expect(heard).toEqual(expected);
    expect(heardElsewhere).toEqual([]);
    expect(await b.getEvidenceSnapshot(snapshot.id)).toEqual(snapshot);
    expect(await b.getEvidenceSnapshot(snapshot.id + 1000)).toBeNull();

    await stop();
    await b.writeSamples([sample('evap1.steam', 2, 3)]);
    await new Promise((resolve) => setTimeout(resolve, 200));
    expect(heard).toHaveLength(expected.length);
  });

  it('listens again after its connection is cut, and reports the gap', async () => {
    const schema = freshSchema();
    const a = await open({ schema, instance: 'cut' });
    const heard: ClusterMessage[] = [];
    let gaps = 0;
    await a.listen(
      (message) => heard.push(message),
      () => gaps++,
    );
    const killed = await admin(async (client) => {
      const result = await client.query<{ ok: boolean }>(
        `SELECT pg_terminate_backend(pid) AS ok FROM pg_stat_activity
          WHERE datname = $1 AND application_name = 'trueshift-listen:cut'`,
        [database],
      );
      return result.rows.length;
    });
    expect(killed).toBe(1);
    await eventually(() => gaps === 1);
    await a.writeSamples([sample('after.cut', 0, 1)]);
    await eventually(() => heard.length === 1);
    expect(heard).toEqual([{ kind: 'samples', shards: [shardOf('after.cut', SHARDS)] }]);
  });

  it('refuses to open a schema with another shard count, naming both', async () => {
    const schema = freshSchema();
    await open({ schema, shards: 4 });
    const error = await expectCode(
      openPostgresStore({ url, schema, shards: 2 }),
      'STORE_SHARDS_MISMATCH',
    );
    expect(String(error)).toContain('4 shards');
    expect(String(error)).toContain('started with 2');
  });

  it('sets up a new schema once when three instances open it at the same moment', async () => {
    const schema = freshSchema();
    const stores = await Promise.all([1, 2, 3].map(() => open({ schema })));
    expect(stores).toHaveLength(3);
    const counts = await admin(async (client) => {
      const steps = await client.query<{ version: number }>(
        `SELECT version FROM "${schema}".schema_migrations ORDER BY version`,
      );
      const leases = await client.query<{ n: string }>(
        `SELECT count(*) AS n FROM "${schema}".leases`,
      );
      return { steps: steps.rows.map((row) => row.version), leases: Number(leases.rows[0]?.n) };
    });
    expect(counts).toEqual({ steps: migrations.map((m) => m.version), leases: SHARDS });
    // All three work on the same tables.
    await stores[0]?.writeSamples([sample('shared', 0, 1)]);
    expect(await stores[2]?.countSamples('shared')).toBe(1);
  });

  it('answers STORE_UNAVAILABLE when the database takes no writes', async () => {
    const schema = freshSchema();
    const store = await open({ schema, instance: 'ro' });
    await store.writeSamples([sample('ro', 0, 1)]);
    await admin(async (client) => {
      await client.query(`ALTER DATABASE "${database}" SET default_transaction_read_only = on`);
      // The pool's open connections keep their settings; new ones read the database default.
      await client.query(
        `SELECT pg_terminate_backend(pid) FROM pg_stat_activity
          WHERE datname = $1 AND application_name = 'trueshift:ro'`,
        [database],
      );
    });
    try {
      // The first attempt may still meet a connection the pool has not yet seen die.
      let error: unknown;
      for (let attempt = 0; attempt < 3; attempt++) {
        error = await store.writeSamples([sample('ro', 1, 2)]).then(
          () => null,
          (caught: unknown) => caught,
        );
        if (isTrueshiftError(error)) break;
      }
      expect(isTrueshiftError(error) ? error.code : error).toBe('STORE_UNAVAILABLE');
    } finally {
      await admin(async (client) => {
        // This connection, too, starts read-only now.
        await client.query('SET default_transaction_read_only = off');
        await client.query(`ALTER DATABASE "${database}" RESET default_transaction_read_only`);
      });
    }
    expect(await store.countSamples('ro')).toBe(1);
  });

  it('answers STORE_UNAVAILABLE when the server cannot be reached', async () => {
    // Port 1 on loopback: refused at once, nothing leaves the machine.
    await expectCode(
      openPostgresStore({ url: 'postgres://postgres@127.0.0.1:1/none', schema: freshSchema() }),
      'STORE_UNAVAILABLE',
    );
  });

  it('opens one alert for a dedupe key that several instances raise at once', async () => {
    const schema = freshSchema();
    const [p, q, r] = await Promise.all(
      ['p', 'q', 'r'].map((instance) => open({ schema, instance })),
    );
    if (p === undefined || q === undefined || r === undefined) throw new Error('three stores');
    const alert = {
      tag: 'kiln1.temp',
      markId: null,
      kind: 'unmarked-shift' as const,
      dedupeKey: 'unmarked-shift:kiln1.temp',
      title: 'Kiln 1 temperature shifted',
      at: T0,
      evidence: {},
    };
    const target = { channel: 'mqtt' as const, target: 'trueshift/alerts', createdAt: T0 };
    const changes = await Promise.all(
      [p, q, r].flatMap((store) => [1, 2, 3].map(() => store.raiseAlert(alert, [target]))),
    );
    expect(changes.filter((c) => c.change === 'opened')).toHaveLength(1);
    expect(changes.filter((c) => c.change === 'repeated')).toHaveLength(8);
    expect(new Set(changes.map((c) => c.alert.id)).size).toBe(1);
    const [only] = await p.listAlerts();
    expect(only?.repeats).toBe(8);
    // Only the opening is announced.
    expect(await q.countOutbox()).toEqual({ pending: 1, delivered: 0, dead: 0 });
  });

  it('returns int8 columns as numbers', async () => {
    const store = await open({ schema: freshSchema() });
    await store.writeSamples([sample('n', 0, 1)]);
    const [stored] = await store.samplesAfter(0, 1);
    expect(typeof stored?.seq).toBe('number');
    expect(stored?.t).toBe(T0);
    expect(typeof (await store.countSamples())).toBe('number');
  });
});
