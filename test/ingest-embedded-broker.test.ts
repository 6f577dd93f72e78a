/**
 * The embedded broker (aedes on 127.0.0.1, port 0) with the MQTT ingest end to end, as a fresh
 * machine with no broker of its own runs it: MQTT 3.1.1, a persistent session while the process runs.
 */
import { mkdtemp, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { connectAsync, type MqttClient } from 'mqtt';
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import {
  buildMqttIngest,
  type EmbeddedBroker,
  type MqttIngest,
  startEmbeddedBroker,
} from '@trueshift/ingest';
import type { Store } from '@trueshift/store';
import { openSqliteStore } from '@trueshift/store-sqlite';
import { captureLog } from './helpers/logs.js';
import { failingFirstWrites, waitFor } from './helpers/store-faults.js';

const T0 = Date.UTC(2026, 0, 1);

let dir: string;
let store: Store;
let broker: EmbeddedBroker;
let publisher: MqttClient;
let ingests: MqttIngest[] = [];
let now = T0;
const clock = (): number => now++;

beforeEach(async () => {
  dir = await mkdtemp(join(tmpdir(), 'trueshift-embedded-'));
  store = openSqliteStore({ path: join(dir, 'store.db') });
  broker = await startEmbeddedBroker({ host: '127.0.0.1', port: 0 });
  publisher = await connectAsync(broker.url, { clientId: 'publisher', protocolVersion: 4 });
});

afterEach(async () => {
  for (const ingest of ingests) await ingest.close();
  ingests = [];
  await publisher.endAsync(true);
  await broker.close();
  await store.close();
  await rm(dir, { recursive: true, force: true });
});

async function startIngest(ingestStore: Store = store): Promise<MqttIngest> {
  const ingest = buildMqttIngest({
    store: ingestStore,
    log: captureLog().log,
    clock,
    options: {
      url: broker.url,
      clientId: 'trueshift-ingest',
      protocolVersion: 4,
      sessionExpirySec: 0,
      subscriptions: [{ filter: 'site/#', tag: '{#}', format: 'json' }],
      maxFutureMs: 60_000,
      maxPayloadBytes: 4096,
      reconnectMinMs: 20,
      reconnectMaxMs: 200,
    },
  });
  ingests.push(ingest);
  await ingest.start();
  await ingest.ready();
  return ingest;
}

describe('embedded broker', () => {
  it('listens on the ephemeral port it reports', () => {
    expect(broker.port).toBeGreaterThan(0);
    expect(broker.url).toBe(`mqtt://127.0.0.1:${broker.port}`);
  });

  it('carries samples to the store, and keeps the session for an ingest that restarts', async () => {
    const ingest = await startIngest();
    await publisher.publishAsync(
      'site/mill/speed',
      JSON.stringify({ value: 1480, time: T0 - 2000 }),
      {
        qos: 1,
      },
    );
    await publisher.publishAsync('site/mill/speed', JSON.stringify({ value: 'fast' }), { qos: 1 });
    await waitFor(() => ingest.health().counters.received === 2, 'two messages');
    await waitFor(() => ingest.health().pending === 0, 'the commit');
    expect(Array.from((await store.readSamples('mill/speed')).value)).toEqual([1480]);
    expect((await store.listQuarantine())[0]?.code).toBe('VALUE_NOT_NUMBER');

    await ingest.close();
    for (let i = 0; i < 10; i++) {
      await publisher.publishAsync(
        'site/mill/speed',
        JSON.stringify({ value: i, time: T0 - 1000 + i }),
        {
          qos: 1,
        },
      );
    }
    const restarted = await startIngest();
    await waitFor(
      async () => (await store.countSamples('mill/speed')) === 11,
      'the queued samples',
    );
    await waitFor(() => restarted.health().pending === 0, 'the acknowledgements');
    expect(restarted.health().counters.received).toBe(10);
  });

  it('has the messages delivered again when the store fails', async () => {
    const ingest = await startIngest(failingFirstWrites(store, 2));
    for (let i = 0; i < 25; i++) {
      await publisher.publishAsync(
        'site/press/force',
        JSON.stringify({ value: i, time: T0 - 100 + i }),
        {
          qos: 1,
        },
      );
    }
    await waitFor(async () => (await store.countSamples('press/force')) === 25, 'all 25 samples');
    await waitFor(() => ingest.health().healthy && ingest.health().pending === 0, 'recovery');
    expect(ingest.health().counters.storeFailures).toBe(2);
    expect(await store.countSamples()).toBe(25);
  });
});
