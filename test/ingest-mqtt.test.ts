/**
 * MQTT ingest against a real mosquitto and a real SQLite file: samples stored once, bad payloads
 * quarantined, nothing acknowledged before it is stored, redelivery after store failures and
 * dropped connections, retained messages, and persistent sessions across restarts.
 */
import { mkdtemp, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { connectAsync, type MqttClient } from 'mqtt';
import { afterAll, afterEach, beforeAll, beforeEach, describe, expect, it } from 'vitest';
import type { SubscriptionSpec } from '@trueshift/formats';
import { buildMqttIngest, type MqttIngest, type MqttIngestOptions } from '@trueshift/ingest';
import type { Store } from '@trueshift/store';
import { openSqliteStore } from '@trueshift/store-sqlite';
import { captureLog } from './helpers/logs.js';
import { type Mosquitto, startMosquitto } from './helpers/mosquitto.js';
import { failingFirstWrites, waitFor, withWriteHook } from './helpers/store-faults.js';

// Sample times in these tests lie around 2026-01-01; the ingest's clock ticks 1 ms per reading so
// that samples without a time of their own get distinct, repeatable times.
const T0 = Date.UTC(2026, 0, 1);

function tickingClock(start = T0): () => number {
  let now = start;
  return () => now++;
}

/** Each test has its own topic root, so retained messages of one test never reach another. */
function root(): string {
  return `plant${testNumber}`;
}

function subscriptions(): SubscriptionSpec[] {
  return [
    { filter: `${root()}/+/number`, tag: '{2}.pv', format: 'number' },
    { filter: `${root()}/+/json`, tag: '{2}.json', format: 'json' },
  ];
}

let broker: Mosquitto;
let dir: string;
let store: Store;
let testNumber = 0;
/** One clock per test, shared by every ingest in it: a restarted ingest lives on in the same time. */
let clock: () => number;
const open: (MqttIngest | MqttClient)[] = [];

beforeAll(async () => {
  broker = await startMosquitto();
});

afterAll(async () => {
  await broker.dispose();
});

beforeEach(async () => {
  testNumber++;
  clock = tickingClock();
  dir = await mkdtemp(join(tmpdir(), 'trueshift-ingest-mqtt-'));
  store = openSqliteStore({ path: join(dir, 'store.db') });
});

afterEach(async () => {
  for (const part of open.splice(0).reverse()) {
    if ('health' in part) await part.close();
    else await part.endAsync(true);
  }
  await store.close();
  await rm(dir, { recursive: true, force: true });
});

function options(overrides: Partial<MqttIngestOptions> = {}): MqttIngestOptions {
  return {
    url: broker.url,
    clientId: `ingest-test-${testNumber}`,
    sessionExpirySec: 600,
    subscriptions: subscriptions(),
    maxFutureMs: 60_000,
    maxPayloadBytes: 64 * 1024,
    reconnectMinMs: 50,
    reconnectMaxMs: 400,
    ...overrides,
  };
}

async function startIngest(
  ingestStore: Store,
  overrides: Partial<MqttIngestOptions> = {},
): Promise<MqttIngest & { logs: ReturnType<typeof captureLog> }> {
  const logs = captureLog();
  const ingest = buildMqttIngest({
    store: ingestStore,
    log: logs.log,
    clock,
    options: options(overrides),
  });
  open.push(ingest);
  await ingest.start();
  await ingest.ready();
  return Object.assign(ingest, { logs });
}

async function publisher(): Promise<MqttClient> {
  const client = await connectAsync(broker.url, {
    clientId: `publisher-${testNumber}-${Math.random().toString(36).slice(2)}`,
    protocolVersion: 5,
  });
  open.push(client);
  return client;
}

async function values(tag: string): Promise<number[]> {
  return Array.from((await store.readSamples(tag)).value);
}

describe('MQTT ingest', () => {
  it('stores bare numbers, JSON samples and JSON array backfills once, and quarantines bad payloads with reasons', async () => {
    const ingest = await startIngest(store);
    const pub = await publisher();
    await pub.publishAsync(`${root()}/evap1/number`, '12.5', { qos: 1 });
    await pub.publishAsync(`${root()}/evap1/number`, '13', { qos: 1 });
    await pub.publishAsync(
      `${root()}/evap1/json`,
      JSON.stringify({ value: 3.25, time: T0 - 60_000, quality: 192 }),
      { qos: 1 },
    );
    const backfill = JSON.stringify([
      { value: 1, time: T0 - 3000 },
      { value: 2, time: '2025-12-31T23:59:58Z' },
    ]);
    await pub.publishAsync(`${root()}/evap2/json`, backfill, { qos: 1 });
    // The same backfill again: a replay, nothing new.
    await pub.publishAsync(`${root()}/evap2/json`, backfill, { qos: 1 });
    await pub.publishAsync(`${root()}/evap1/number`, 'abc', { qos: 1 });
    await pub.publishAsync(`${root()}/evap1/json`, '{"value": 1,', { qos: 1 });
    await pub.publishAsync(`${root()}/evap3/json`, JSON.stringify([{ value: 5 }]), { qos: 1 });

    await waitFor(() => ingest.health().counters.received === 8, 'eight messages');
    await waitFor(() => ingest.health().pending === 0, 'every message committed');

    expect(await values('evap1.pv')).toEqual([12.5, 13]);
    expect(await values('evap1.json')).toEqual([3.25]);
    const evap2 = await store.readSamples('evap2.json');
    expect(Array.from(evap2.t)).toEqual([T0 - 3000, T0 - 2000]);
    expect(Array.from(evap2.value)).toEqual([1, 2]);
    expect(await store.countSamples()).toBe(5);

    const quarantine = await store.listQuarantine();
    const byCode = quarantine.map((entry) => [entry.source, entry.code]);
    expect(byCode).toEqual(
      expect.arrayContaining([
        [`mqtt:${root()}/evap1/number`, 'VALUE_NOT_NUMBER'],
        [`mqtt:${root()}/evap1/json`, 'PAYLOAD_NOT_JSON'],
        [`mqtt:${root()}/evap3/json`, 'TIME_MISSING'],
      ]),
    );
    expect(quarantine).toHaveLength(3);
    const notNumber = quarantine.find((entry) => entry.code === 'VALUE_NOT_NUMBER');
    expect(notNumber?.reason).toContain('"abc" is not a number');
    expect(notNumber?.raw).toBe('abc');
    const counters = ingest.health().counters;
    expect(counters).toMatchObject({ stored: 5, duplicates: 2, quarantined: 3, storeFailures: 0 });
  });

  it('quarantines payloads it cannot read at all and values outside the tag range, and goes on', async () => {
    await store.upsertTag({ name: 'tank.pv', validMin: 0, validMax: 100 }, T0);
    const ingest = await startIngest(store, { maxPayloadBytes: 256 });
    const pub = await publisher();
    await pub.publishAsync(`${root()}/tank/number`, Buffer.from([0x34, 0xff, 0xfe]), { qos: 1 });
    await pub.publishAsync(`${root()}/tank/number`, '9'.repeat(300), { qos: 1 });
    await pub.publishAsync(`${root()}/tank/number`, '140', { qos: 1 });
    await pub.publishAsync(`${root()}/tank/number`, '55', { qos: 1 });
    await waitFor(() => ingest.health().counters.received === 4, 'four messages');
    await waitFor(() => ingest.health().pending === 0, 'the commit');
    expect(await values('tank.pv')).toEqual([55]);
    const codes = (await store.listQuarantine()).map((entry) => entry.code).sort();
    expect(codes).toEqual(['PAYLOAD_NOT_UTF8', 'PAYLOAD_TOO_LARGE', 'VALUE_OUT_OF_RANGE']);
    expect(ingest.health()).toMatchObject({ healthy: true, lastError: null });
  });

  it('acknowledges nothing while the store fails: the broker redelivers and every sample is stored exactly once', async () => {
    const failures = 3;
    const flaky = failingFirstWrites(store, failures);
    const ingest = await startIngest(flaky);
    const pub = await publisher();
    const sent: Promise<unknown>[] = [];
    for (let i = 0; i < 40; i++) {
      // Half without a time of their own: the redelivery must reuse the first receive time.
      sent.push(pub.publishAsync(`${root()}/unit${i % 4}/number`, String(i), { qos: 1 }));
      sent.push(
        pub.publishAsync(
          `${root()}/unit${i % 4}/json`,
          JSON.stringify({ value: i, time: T0 - 100_000 + i }),
          { qos: 1 },
        ),
      );
    }
    await Promise.all(sent);

    await waitFor(async () => (await store.countSamples()) === 80, 'all 80 samples', 15_000);
    await waitFor(() => ingest.health().pending === 0 && ingest.health().healthy, 'recovery');
    const health = ingest.health();
    expect(health.counters.storeFailures).toBe(failures);
    expect(flaky.writeCalls).toBeGreaterThan(failures);
    // Redelivered messages came back: more were received than published.
    expect(health.counters.received).toBeGreaterThan(80);
    expect(health.reconnects).toBeGreaterThanOrEqual(failures);
    expect(await store.countSamples()).toBe(80);
    const numbers: number[] = [];
    for (let unit = 0; unit < 4; unit++) numbers.push(...(await values(`unit${unit}.pv`)));
    expect(numbers.sort((a, b) => a - b)).toEqual(Array.from({ length: 40 }, (_, i) => i));
    expect(await store.countQuarantine()).toBe(0);
    const failure = ingest.logs.records().find((record) => record.level === 50);
    expect(failure?.err?.message).toContain('injected store failure 1 of 3');
  });

  it('keeps QoS 0 messages, which no broker sends twice, through store failures until they are stored', async () => {
    const flaky = failingFirstWrites(store, 2);
    const ingest = await startIngest(flaky, { reconnectMinMs: 20, reconnectMaxMs: 100 });
    const pub = await publisher();
    for (let i = 0; i < 10; i++) {
      await pub.publishAsync(
        `${root()}/fire/json`,
        JSON.stringify({ value: i, time: T0 - 50 + i }),
        {
          qos: 0,
        },
      );
    }
    await waitFor(async () => (await store.countSamples('fire.json')) === 10, 'all 10 samples');
    expect(await values('fire.json')).toEqual(Array.from({ length: 10 }, (_, i) => i));
    expect(ingest.health().counters).toMatchObject({ storeFailures: 2, lostQos0: 0 });
  });

  it('sends no PUBACK before the commit: a connection lost during the commit brings the message back, and it is stored once', async () => {
    let release!: () => void;
    const gate = new Promise<void>((resolve) => {
      release = resolve;
    });
    let held = false;
    const gated = withWriteHook(store, async ({ call }) => {
      if (call === 1) {
        held = true;
        await gate;
      }
    });
    // A fixed broker port, so the restarted broker is found at the same address.
    const own = await startMosquitto();
    try {
      const ingest = await startIngest(gated, { url: own.url, reconnectMaxMs: 200 });
      const pub = await connectAsync(own.url, {
        clientId: `pub-gate-${testNumber}`,
        protocolVersion: 5,
      });
      await pub.publishAsync(`${root()}/gate/number`, '41.5', { qos: 1 });
      await pub.endAsync();
      await waitFor(() => held, 'the commit to start');
      // The broker goes away while the commit is held: it saves the unacknowledged message.
      await own.stop();
      const restarted = await startMosquitto({ port: own.port, dir: own.dir });
      try {
        release();
        await waitFor(() => ingest.health().counters.received >= 2, 'the redelivery');
        await waitFor(() => ingest.health().pending === 0, 'the redelivery committed');
        expect(await values('gate.pv')).toEqual([41.5]);
        expect(ingest.health().counters).toMatchObject({ stored: 1, duplicates: 1 });
        // Acknowledged now: a fresh start with the same session gets nothing more.
        await ingest.close();
        const again = await startIngest(store, { url: restarted.url });
        await new Promise((resolve) => setTimeout(resolve, 300));
        expect(again.health().counters.received).toBe(0);
        await again.close();
      } finally {
        await restarted.dispose();
      }
    } finally {
      await own.dispose();
    }
  });

  it('skips retained messages without a time, and a new subscription replaying retained messages stores nothing twice', async () => {
    const pub = await publisher();
    await pub.publishAsync(`${root()}/kiln/number`, '812', { qos: 1, retain: true });
    await pub.publishAsync(`${root()}/kiln/json`, JSON.stringify({ value: 7.5, time: T0 - 5000 }), {
      qos: 1,
      retain: true,
    });
    const first = await startIngest(store, { clientId: `retained-a-${testNumber}` });
    await waitFor(() => first.health().counters.received === 2, 'both retained messages');
    await waitFor(() => first.health().pending === 0, 'the commit');
    expect(first.health().counters).toMatchObject({ stored: 1, skippedRetained: 1 });
    expect(await values('kiln.json')).toEqual([7.5]);
    expect(await store.countSamples('kiln.pv')).toBe(0);

    // A second client id is a new session: the broker sends the retained messages again.
    const second = await startIngest(store, { clientId: `retained-b-${testNumber}` });
    await waitFor(() => second.health().counters.received === 2, 'the replay');
    await waitFor(() => second.health().pending === 0, 'the commit');
    expect(second.health().counters).toMatchObject({
      stored: 0,
      duplicates: 1,
      skippedRetained: 1,
    });
    expect(await store.countSamples()).toBe(1);

    // The same client id again resumes its session: subscribing again replays nothing.
    await first.close();
    await second.close();
    const resumed = await startIngest(store, { clientId: `retained-a-${testNumber}` });
    await new Promise((resolve) => setTimeout(resolve, 300));
    expect(resumed.health().counters.received).toBe(0);
    // A live (not retained) number on the same topic is stored as usual.
    await pub.publishAsync(`${root()}/kiln/number`, '815', { qos: 1 });
    await waitFor(async () => (await store.countSamples('kiln.pv')) === 1, 'the live sample');
    expect(await values('kiln.pv')).toEqual([815]);
  });

  it('picks up the messages published while it was away when restarted with the same client id', async () => {
    const first = await startIngest(store);
    await first.close();
    const pub = await publisher();
    for (let i = 0; i < 30; i++) {
      await pub.publishAsync(
        `${root()}/away/json`,
        JSON.stringify({ value: i, time: T0 - 30_000 + i }),
        {
          qos: 1,
        },
      );
    }
    const second = await startIngest(store);
    await waitFor(
      async () => (await store.countSamples('away.json')) === 30,
      'the 30 queued samples',
    );
    expect(await values('away.json')).toEqual(Array.from({ length: 30 }, (_, i) => i));
    await waitFor(() => second.health().pending === 0, 'the acknowledgements');
    expect(second.health().counters.received).toBe(30);
  });

  it('splits a shared subscription over two ingests: every message stored once, each ingest takes a share', async () => {
    const group = `group${testNumber}`;
    const a = await startIngest(store, { clientId: `shared-a-${testNumber}`, sharedGroup: group });
    const b = await startIngest(store, { clientId: `shared-b-${testNumber}`, sharedGroup: group });
    const pub = await publisher();
    for (let i = 0; i < 200; i++) {
      await pub.publishAsync(
        `${root()}/u${i % 5}/json`,
        JSON.stringify({ value: i, time: T0 + i }),
        {
          qos: 1,
        },
      );
    }
    const total = async (): Promise<number> => {
      let n = 0;
      for (let u = 0; u < 5; u++) n += await store.countSamples(`u${u}.json`);
      return n;
    };
    await waitFor(async () => (await total()) === 200, 'the 200 samples');
    await waitFor(
      () => a.health().pending === 0 && b.health().pending === 0,
      'the acknowledgements',
    );
    const toA = a.health().counters.received;
    const toB = b.health().counters.received;
    // The broker hands each message to one member of the group: nothing twice, both had a share.
    expect(toA + toB).toBe(200);
    expect(Math.min(toA, toB)).toBeGreaterThan(0);
    expect(await values('u3.json')).toEqual(Array.from({ length: 40 }, (_, i) => i * 5 + 3));
  });

  it('closes cleanly in the middle of a burst: what it took is stored and acknowledged, the rest comes to the next start', async () => {
    const pub = await publisher();
    const first = await startIngest(store, { maxBatch: 20 });
    const sent: Promise<unknown>[] = [];
    for (let i = 0; i < 400; i++) {
      sent.push(pub.publishAsync(`${root()}/burst/number`, String(i), { qos: 1 }));
    }
    await waitFor(() => first.health().counters.received > 0, 'the burst to start');
    await first.close();
    await Promise.all(sent);
    const taken = first.health().counters.stored;
    expect(await store.countSamples('burst.pv')).toBe(taken);
    const second = await startIngest(store);
    await waitFor(async () => (await store.countSamples('burst.pv')) === 400, 'all 400 samples');
    await waitFor(() => second.health().pending === 0, 'the acknowledgements');
    expect(second.health().counters.received).toBe(400 - taken);
    const stored = await values('burst.pv');
    expect(stored.sort((a, b) => a - b)).toEqual(Array.from({ length: 400 }, (_, i) => i));
  });

  it('starts while the broker is down and connects with back-off when it comes up', async () => {
    const own = await startMosquitto();
    await own.stop();
    try {
      const { log } = captureLog();
      const ingest = buildMqttIngest({
        store,
        log,
        clock,
        options: options({ url: own.url, reconnectMinMs: 20, reconnectMaxMs: 100 }),
      });
      open.push(ingest);
      await ingest.start();
      await waitFor(() => ingest.health().reconnects >= 2, 'a few attempts');
      expect(ingest.health()).toMatchObject({ connected: false, healthy: false });
      expect(ingest.health().lastError).toMatch(/ECONNREFUSED/);
      const restarted = await startMosquitto({ port: own.port, dir: own.dir });
      try {
        await ingest.ready(5000);
        expect(ingest.health()).toMatchObject({ connected: true, healthy: true });
        await ingest.close();
      } finally {
        await restarted.dispose();
      }
    } finally {
      await own.dispose();
    }
  });

  it('refuses a configuration that would lose messages, naming every problem', () => {
    const { log } = captureLog();
    expect(() =>
      buildMqttIngest({
        store,
        log,
        clock,
        options: options({
          sessionExpirySec: 0,
          subscriptions: [{ filter: 'a/#/b', tag: '{3}', format: 'number' }],
        }),
      }),
    ).toThrow(/session expiry must be more than 0 s.*|subscription 1:/s);
    expect(() =>
      buildMqttIngest({
        store,
        log,
        clock,
        options: options({ sessionExpirySec: 0 }),
      }),
    ).toThrow(/session expiry/);
    expect(() =>
      buildMqttIngest({
        store,
        log,
        clock,
        options: options({ protocolVersion: 4, sharedGroup: 'a/b' }),
      }),
    ).toThrow(/shared subscriptions need MQTT 5.*must not hold/s);
  });
});
