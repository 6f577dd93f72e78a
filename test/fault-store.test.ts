/**
 * A store that stops taking writes (a full disk) under a steady QoS 1 stream, with the MQTT ingest
 * and the API wired as `startApp` wires them: nothing is acknowledged or stored while the fault
 * lasts, /ready answers 503 with the cause, the log says it, and once the fault clears the broker's
 * redeliveries bring every sample in exactly once.
 *
 * Tests run as root, where a read-only file or folder does not stop SQLite writing, and a small
 * tmpfs needs mount privileges; so the fault is a wrapper around the real SQLite store that throws
 * SQLite's own full-disk error from writeSamples.
 */
import { setTimeout as sleep } from 'node:timers/promises';
import { connectAsync } from 'mqtt';
import type { MqttClient } from 'mqtt';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildMqttIngest } from '@trueshift/ingest';
import type { MqttIngest } from '@trueshift/ingest';
import { startTestApi } from './helpers/api.js';
import type { TestApi } from './helpers/api.js';
import { captureLog } from './helpers/logs.js';
import { startMosquitto } from './helpers/mosquitto.js';
import type { Mosquitto } from './helpers/mosquitto.js';
import { waitFor, withWriteHook } from './helpers/store-faults.js';

const T0 = Date.UTC(2026, 0, 1);
const TAGS = Array.from({ length: 5 }, (_, i) => `disk/t${String(i)}`);
const FULL = 'SQLITE_FULL: database or disk is full';

let broker: Mosquitto | undefined;

beforeAll(async () => {
  broker = await startMosquitto();
});

afterAll(async () => {
  await broker?.dispose();
});

describe('a store that fails its writes', () => {
  let api: TestApi | undefined;
  let ingest: MqttIngest | undefined;
  let publisher: MqttClient | undefined;

  afterAll(async () => {
    await publisher?.endAsync(true);
    await ingest?.close();
    await api?.close();
  });

  it('stops acknowledging, reports the cause on /ready and in the log, and catches up once', async () => {
    if (broker === undefined) throw new Error('no broker');
    const mq = broker;
    let full = false;
    let refused = 0;
    const logs = captureLog('warn');
    const parts: { mqtt?: MqttIngest } = {};
    const testApi = await startTestApi({
      // The same mapping startApp gives the API: readiness follows the ingest's connection.
      deps: {
        health: () => {
          const h = parts.mqtt?.health();
          return h === undefined ? {} : { ingest: { connected: h.connected, detail: h.lastError } };
        },
      },
    });
    api = testApi;
    const store = testApi.store;
    const faulty = withWriteHook(store, () => {
      if (full) {
        refused++;
        throw Object.assign(new Error(FULL), { code: 'SQLITE_FULL' });
      }
    });
    let now = T0;
    const mqtt = buildMqttIngest({
      store: faulty,
      log: logs.log,
      clock: () => now++,
      options: {
        url: mq.url,
        clientId: 'fault-store-ingest',
        sessionExpirySec: 600,
        subscriptions: [{ filter: 'disk/+', tag: 'disk/{2}', format: 'json' }],
        maxFutureMs: 60_000,
        maxPayloadBytes: 64 * 1024,
        reconnectMinMs: 50,
        reconnectMaxMs: 400,
      },
    });
    parts.mqtt = mqtt;
    ingest = mqtt;
    await mqtt.start();
    await mqtt.ready();
    const base = await testApi.listen();
    const readiness = async (): Promise<{ status: number; reasons: string[] }> => {
      const response = await fetch(`${base}/ready`);
      const body = (await response.json()) as { reasons?: string[] };
      return { status: response.status, reasons: body.reasons ?? [] };
    };
    expect((await readiness()).status).toBe(200);

    const client = await connectAsync(mq.url, { clientId: 'fault-store-pub', protocolVersion: 5 });
    publisher = client;
    let sent = 0;
    const publish = async (count: number): Promise<void> => {
      const batch: Promise<unknown>[] = [];
      for (let i = 0; i < count; i++, sent++) {
        const tag = TAGS[sent % TAGS.length] ?? 'disk/t0';
        batch.push(
          client.publishAsync(tag, JSON.stringify({ value: sent, time: T0 - 1_000_000 + sent }), {
            qos: 1,
          }),
        );
      }
      await Promise.all(batch);
    };

    await publish(200);
    await waitFor(async () => (await store.countSamples()) === 200, 'the first 200 stored');

    full = true;
    const streaming = { stop: false };
    // A steady stream goes on through the fault, as a plant does not stop for a full disk.
    const stream = (async () => {
      while (!streaming.stop) {
        await publish(20);
        await sleep(20);
      }
    })();
    await waitFor(() => refused > 0, 'a write refused');
    const stuckAt = await store.countSamples();
    let notReady: { status: number; reasons: string[] } | undefined;
    await waitFor(
      async () => {
        const r = await readiness();
        if (r.status === 503) notReady = r;
        return notReady !== undefined;
      },
      '/ready to answer 503',
      15_000,
    );
    expect(notReady?.reasons.join('\n')).toContain(FULL);
    // How often a probe during the fault is told "ready", for the report: readiness follows the
    // ingest's connection, which comes back between the failed writes.
    const probes: number[] = [];
    await waitFor(
      async () => {
        probes.push((await readiness()).status);
        return sent >= stuckAt + 300;
      },
      'more published during the fault',
      15_000,
    );
    // Nothing got past the fault while it lasted.
    expect(await store.countSamples()).toBe(stuckAt);
    const said = logs
      .records()
      .filter((r) => r.level >= 50 && r.err?.message === FULL)
      .map((r) => r.msg);
    expect(said.length).toBeGreaterThan(0);
    expect(said[0]).toContain('store write failed');

    full = false;
    streaming.stop = true;
    await stream;
    await waitFor(
      async () => (await store.countSamples()) === sent,
      `all ${String(sent)} samples stored after the fault`,
      60_000,
    );
    await waitFor(async () => (await readiness()).status === 200, '/ready to answer 200 again');
    await waitFor(() => mqtt.health().healthy, 'the ingest healthy again');

    expect(await store.countSamples()).toBe(sent);
    expect(await store.countQuarantine()).toBe(0);
    const values: number[] = [];
    for (const tag of TAGS) values.push(...Array.from((await store.readSamples(tag)).value));
    expect(values.sort((a, b) => a - b)).toEqual(Array.from({ length: sent }, (_, i) => i));
    console.info(
      `fault-store: ${String(sent)} published, ${String(sent - stuckAt)} during the fault, ` +
        `${String(refused)} writes refused, ${String(mqtt.health().reconnects)} reconnects, ` +
        `/ready during the fault: ${String(probes.filter((p) => p === 503).length)} of ` +
        `${String(probes.length)} probes 503`,
    );
  }, 120_000);
});
