/**
 * The broker stops and comes back (on the same port, with its persistence) in the middle of a
 * steady QoS 1 stream into the whole service running as its own process: the service reconnects,
 * resubscribes, and every published sample is stored exactly once. ingest-mqtt.test.ts covers a
 * connection lost during one held commit and a start while the broker is down; this is the broker
 * going away under steady load.
 */
import { mkdtemp, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { setTimeout as sleep } from 'node:timers/promises';
import { connectAsync } from 'mqtt';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { openSqliteStore } from '@trueshift/store-sqlite';
import { requireBuiltCli } from './helpers/cli-process.js';
import { startMosquitto } from './helpers/mosquitto.js';
import type { Mosquitto } from './helpers/mosquitto.js';
import { serviceProcess } from './helpers/service-process.js';
import type { ServiceProcess } from './helpers/service-process.js';
import { waitFor } from './helpers/store-faults.js';

const TAGS = 10;
const TOTAL = 4000;

let broker: Mosquitto | undefined;
let service: ServiceProcess | undefined;
let dir: string | undefined;

beforeAll(async () => {
  requireBuiltCli();
  broker = await startMosquitto();
  dir = await mkdtemp(join(tmpdir(), 'trueshift-broker-restart-'));
});

afterAll(async () => {
  if (service !== undefined) await service.kill('SIGKILL').catch(() => undefined);
  await broker?.dispose();
  if (dir !== undefined) await rm(dir, { recursive: true, force: true });
});

describe('the broker restarted mid-stream', () => {
  it('reconnects, resubscribes and stores every QoS 1 sample once', async () => {
    if (broker === undefined || dir === undefined) throw new Error('setup');
    const first = broker;
    const running = await serviceProcess({
      dir,
      brokerUrl: first.url,
      clientId: 'broker-restart-ingest',
    });
    service = running;
    await running.start();

    const client = await connectAsync(first.url, {
      clientId: 'broker-restart-publisher',
      protocolVersion: 5,
      clean: false,
      properties: { sessionExpiryInterval: 600 },
      reconnectPeriod: 100,
    });
    const start = Date.now() - 3_600_000;
    const pending: Promise<unknown>[] = [];
    let sent = 0;
    const publishing = (async () => {
      while (sent < TOTAL) {
        for (let i = 0; i < 20; i++, sent++) {
          pending.push(
            client.publishAsync(
              `trueshift/samples/restart/t${String(sent % TAGS)}`,
              JSON.stringify({ value: sent, time: start + sent }),
              { qos: 1 },
            ),
          );
        }
        // About 1000 a second: steady, not one burst.
        await sleep(20);
      }
    })();

    await waitFor(
      async () => (await running.metric('trueshift_samples_ingested_total')) >= TOTAL / 4,
      'a quarter stored before the restart',
      60_000,
    );
    await first.stop();
    const sentWhileDown = sent;
    await waitFor(
      async () => (await running.metric('trueshift_ingest_connected')) === 0,
      'the service to see the broker gone',
      15_000,
    );
    // Down long enough for both clients to fail a few reconnects.
    await sleep(1000);
    broker = await startMosquitto({ port: first.port, dir: first.dir });
    await publishing;
    await Promise.all(pending);
    await client.endAsync();
    await waitFor(
      async () => (await running.metric('trueshift_samples_ingested_total')) === TOTAL,
      `all ${String(TOTAL)} samples stored (${running.stderr()})`,
      60_000,
    );
    expect(await running.metric('trueshift_ingest_connected')).toBe(1);
    expect(await running.stop()).toBe(0);
    service = undefined;

    const store = openSqliteStore({ path: running.storePath });
    try {
      expect(await store.countSamples()).toBe(TOTAL);
      expect(await store.countQuarantine()).toBe(0);
      const values: number[] = [];
      for (let tag = 0; tag < TAGS; tag++) {
        values.push(...Array.from((await store.readSamples(`restart/t${String(tag)}`)).value));
      }
      expect(values.sort((a, b) => a - b)).toEqual(Array.from({ length: TOTAL }, (_, i) => i));
    } finally {
      await store.close();
    }
    console.info(
      `broker restart: ${String(TOTAL)} published, ${String(sentWhileDown)} when stopped`,
    );
  }, 150_000);
});
