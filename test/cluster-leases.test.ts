/**
 * The cluster service in one process, on a real PostgreSQL database, with the clock and the lease
 * rounds driven by the test: instances share the shards fairly, take over a silent instance's
 * shards once its leases expire and resume its analysis from the saved state, a stale owner cannot
 * save over the new one, and changes reach every instance's event feed.
 */
import { afterAll, afterEach, beforeAll, describe, expect, it } from 'vitest';
import { buildAnalyser } from '@trueshift/analyser-service';
import { buildCluster } from '@trueshift/cluster';
import type { Cluster, ClusterEvents } from '@trueshift/cluster';
import { shardOf } from '@trueshift/store';
import type { AlertChange, SampleInput } from '@trueshift/store';
import { openPostgresStore } from '@trueshift/store-postgres';
import type { PostgresStore } from '@trueshift/store-postgres';
import { captureLog } from './helpers/logs.js';
import { createTestDatabase } from './helpers/postgres.js';
import type { TestDatabase } from './helpers/postgres.js';
import { waitFor } from './helpers/store-faults.js';

const SHARDS = 8;
const LEASE_MS = 10_000;
const T0 = Date.UTC(2026, 9, 1, 6, 0, 0);

let db: TestDatabase;
let schemaNumber = 0;
const opened: { store: PostgresStore; cluster: Cluster | null }[] = [];

beforeAll(async () => {
  db = await createTestDatabase('leases');
});

afterAll(async () => {
  await db.drop();
});

afterEach(async () => {
  for (const part of opened.splice(0).reverse()) {
    await part.cluster?.close().catch(() => undefined);
    await part.store.close();
  }
});

interface Instance {
  store: PostgresStore;
  cluster: Cluster;
  logs: ReturnType<typeof captureLog>;
}

async function instance(name: string, schema: string, clock: () => number): Promise<Instance> {
  const store = await openPostgresStore({ url: db.url, shards: SHARDS, instance: name, schema });
  const logs = captureLog('warn');
  const cluster = buildCluster({
    store,
    log: logs.log,
    clock,
    // Rounds happen when the test calls balance(), never on a timer of their own.
    timers: { setInterval: () => 0, clearInterval: () => undefined },
    options: { leaseMs: LEASE_MS, renewMs: 1000 },
    makeAnalyser: (shard, fence) =>
      buildAnalyser({
        store,
        log: logs.log,
        clock,
        options: { pollMs: 0, shard, fence },
      }),
  });
  opened.push({ store, cluster });
  return { store, cluster, logs };
}

function samples(tags: readonly string[], from: number, count: number): SampleInput[] {
  const out: SampleInput[] = [];
  for (let i = 0; i < count; i++) {
    for (const [j, tag] of tags.entries()) {
      out.push({
        tag,
        t: T0 + (from + i) * 60_000,
        value: 20 + ((i * 7 + j * 3) % 11) / 10,
        quality: 192,
        source: 'test',
        receivedAt: T0,
      });
    }
  }
  return out;
}

const TAGS = Array.from({ length: 24 }, (_, i) => `press${String(i % 4)}/cell${String(i)}/force`);

describe('cluster leases', () => {
  it('shares the shards fairly, takes over a silent instance, and fences its stale saves', async () => {
    const schema = `leases_${String(++schemaNumber)}`;
    let now = T0;
    const clock = (): number => now;
    const a = await instance('node-a', schema, clock);
    const b = await instance('node-b', schema, clock);
    await a.cluster.start();
    await b.cluster.start();
    // A second round each: the first of a saw only itself alive and took every shard.
    await a.cluster.balance();
    await b.cluster.balance();
    expect(a.cluster.owned().length + b.cluster.owned().length).toBe(SHARDS);
    expect(a.cluster.owned()).toHaveLength(SHARDS / 2);
    expect(b.cluster.owned()).toHaveLength(SHARDS / 2);

    await a.store.writeSamples(samples(TAGS, 0, 40));
    await a.cluster.drain();
    await b.cluster.drain();
    const keyOf = (tag: string): string =>
      `shard:${String(shardOf(tag, SHARDS))}/${String(SHARDS)}:tag:${tag}`;
    for (const tag of TAGS) {
      const state = await a.store.loadAnalyserState(keyOf(tag));
      expect(state?.lastSeq, tag).toBeGreaterThan(0);
    }

    // node-b goes silent (a long pause): once its leases lapse node-a takes every shard and its
    // analysers resume from what node-b saved.
    const aShards = a.cluster.owned();
    for (let step = 0; step <= LEASE_MS / 1000; step++) {
      now += 1000;
      await a.cluster.balance();
    }
    // node-a kept its own shards throughout (renewed every round) and added node-b's.
    expect(a.cluster.owned().filter((s) => aShards.includes(s))).toEqual(aShards);
    expect(a.cluster.owned()).toHaveLength(SHARDS);
    await a.store.writeSamples(samples(TAGS, 40, 5));
    await a.cluster.drain();
    const all = await a.store.samplesAfter(0, 10_000);
    for (const tag of TAGS) {
      const last = all.filter((s) => s.tag === tag).at(-1)?.seq;
      expect((await a.store.loadAnalyserState(keyOf(tag)))?.lastSeq, tag).toBe(last);
    }

    // node-b wakes up: its analysers, still holding their old leases in memory, are woken by the
    // store's message about new samples, fold them and try to save. Refused: they stop, and the
    // state stays node-a's, which folds the same samples itself.
    await b.store.writeSamples(samples(TAGS, 45, 1));
    await waitFor(() => b.cluster.owned().length === 0, 'node-b’s analysers to stop');
    const lostLeases = b.logs.records().filter((r) => r.msg.includes('lease lost'));
    expect(lostLeases.length).toBeGreaterThan(0);
    await a.cluster.drain();
    const now2 = await a.store.samplesAfter(0, 10_000);
    for (const tag of TAGS) {
      const last = now2.filter((s) => s.tag === tag).at(-1)?.seq;
      expect((await a.store.loadAnalyserState(keyOf(tag)))?.lastSeq, tag).toBe(last);
    }
    // Its next round finds the leases gone and takes nothing while node-a holds every shard.
    await b.cluster.balance();
    expect(b.cluster.owned()).toEqual([]);
    for (const lease of await a.store.listLeases()) expect(lease.owner).toBe('node-a');

    // Back in the round, node-b gets its fair share again from node-a.
    await b.cluster.balance();
    await a.cluster.balance();
    await b.cluster.balance();
    expect(a.cluster.owned()).toHaveLength(SHARDS / 2);
    expect(b.cluster.owned()).toHaveLength(SHARDS / 2);
  });

  it('carries alert changes made on one instance to the event feed of the other', async () => {
    const schema = `leases_${String(++schemaNumber)}`;
    const clock = (): number => T0;
    const a = await instance('node-a', schema, clock);
    const b = await instance('node-b', schema, clock);
    await a.cluster.start();
    await b.cluster.start();
    const seenOnB: ClusterEvents['alert'][0][] = [];
    const seenOnA: AlertChange[] = [];
    b.cluster.events.on('alert', (change) => seenOnB.push(change));
    a.cluster.events.on('alert', (change) => seenOnA.push(change));

    const raised = await a.store.raiseAlert(
      {
        tag: TAGS[0] ?? 'x',
        markId: null,
        kind: 'stale',
        dedupeKey: 'stale:test',
        title: 'no samples for 10 minutes',
        at: T0,
        evidence: {},
      },
      [],
    );
    await waitFor(() => seenOnB.length === 1, 'the alert on node-b’s feed');
    expect(seenOnB[0]).toMatchObject({ change: 'opened', alert: { id: raised.alert.id } });
    await b.store.acknowledgeAlert(raised.alert.id, 'shift lead', 'checked the sensor', T0, []);
    await waitFor(() => seenOnA.length === 1, 'the acknowledgement on node-a’s feed');
    expect(seenOnA[0]).toMatchObject({ change: 'acknowledged', alert: { id: raised.alert.id } });
    // Each instance's own changes are not echoed back to it.
    expect(seenOnB).toHaveLength(1);
  });
});
