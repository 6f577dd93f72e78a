/**
 * Speed of the ingest: QoS 1 single-value MQTT messages per second through the MQTT ingest into a
 * SQLite store, beside a bare mqtt.js subscriber that acknowledges at once and stores nothing,
 * measured against the same spawned mosquitto in the same run. CSV files (the drop folder and
 * `trueshift import` share `importCsvFile`) are measured in import.bench.ts.
 *
 * Each MQTT run queues N messages for an offline persistent session first and then times the
 * subscriber draining them, so both subscribers see the same broker work and no publisher competes
 * with them for the CPU. Medians of several runs; the machine is shared and noisy, so the ratios
 * measured within one run are the figures to compare.
 *
 * Run with `npm run build && npx tsx test/bench/ingest.bench.ts`.
 */
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { connect, connectAsync, type IClientOptions, type MqttClient } from 'mqtt';
import { pino } from 'pino';
import { parseMqttMessage, type SubscriptionSpec } from '@trueshift/formats';
import { buildMqttIngest } from '@trueshift/ingest';
import type { SampleInput } from '@trueshift/store';
import { openSqliteStore } from '@trueshift/store-sqlite';
import { startMosquitto } from '../helpers/mosquitto.js';
import { benchReport, machineLine, median } from './bench-kit.js';

const MESSAGES = Number(process.env.BENCH_MQTT_MESSAGES ?? 50_000);
const MQTT_RUNS = Number(process.env.BENCH_MQTT_RUNS ?? 7);
const T0 = Date.UTC(2026, 0, 1);
// About what the ingest commits at a time while draining a queue on this machine (10 ms window).
const PARTS_BATCH = 300;

function until(check: () => boolean, timeoutMs: number): Promise<void> {
  return new Promise((resolve, reject) => {
    const deadline = Date.now() + timeoutMs;
    const tick = (): void => {
      if (check()) resolve();
      else if (Date.now() > deadline) reject(new Error('benchmark run timed out'));
      else setTimeout(tick, 1);
    };
    tick();
  });
}

const report = benchReport('ingest');
const { say } = report;

const work = mkdtempSync(join(tmpdir(), 'trueshift-bench-ingest-'));
const broker = await startMosquitto();
const log = pino({ level: 'silent' });
const session = (clientId: string): IClientOptions => ({
  clientId,
  clean: false,
  protocolVersion: 5,
  properties: { sessionExpiryInterval: 600, receiveMaximum: 2000 },
});

/** Queues MESSAGES single values on `topic` for the offline session `clientId`. */
async function queueMessages(clientId: string, topic: string): Promise<void> {
  const subscriber = await connectAsync(broker.url, session(clientId));
  await subscriber.subscribeAsync(`${topic}/#`, { qos: 1 });
  await subscriber.endAsync();
  const publisher = await connectAsync(broker.url, {
    clientId: `${clientId}-pub`,
    protocolVersion: 5,
  });
  const sent: Promise<unknown>[] = [];
  for (let i = 0; i < MESSAGES; i++) {
    sent.push(publisher.publishAsync(`${topic}/v${i % 10}`, (i * 0.5).toFixed(1), { qos: 1 }));
  }
  await Promise.all(sent);
  await publisher.endAsync();
}

/** Messages per second drained by a bare subscriber that acknowledges each at once. */
async function bareRun(run: number): Promise<number> {
  const clientId = `bench-bare-${run}`;
  await queueMessages(clientId, `bare${run}`);
  let received = 0;
  const start = performance.now();
  // Connected by hand, so the handler is in place before the first queued message arrives.
  const client: MqttClient = connect(broker.url, { ...session(clientId), manualConnect: true });
  client.handleMessage = (_packet, callback) => {
    received++;
    callback();
  };
  client.connect();
  await until(() => received >= MESSAGES, 120_000);
  const seconds = (performance.now() - start) / 1000;
  await client.endAsync();
  return MESSAGES / seconds;
}

/** Messages per second drained by the ingest, committed to SQLite and acknowledged. */
async function ingestRun(run: number): Promise<number> {
  const clientId = `bench-ingest-${run}`;
  await queueMessages(clientId, `ingest${run}`);
  const store = openSqliteStore({ path: join(work, `mqtt-${run}.db`) });
  let now = T0;
  const ingest = buildMqttIngest({
    store,
    log,
    clock: () => now++,
    options: {
      url: broker.url,
      clientId,
      sessionExpirySec: 600,
      subscriptions: [{ filter: `ingest${run}/+`, tag: 'bench.{2}', format: 'number' }],
      maxFutureMs: 60_000,
      maxPayloadBytes: 1024,
      reconnectMinMs: 100,
      reconnectMaxMs: 1000,
    },
  });
  const start = performance.now();
  await ingest.start();
  await until(() => {
    const { counters, pending } = ingest.health();
    return counters.stored >= MESSAGES && pending === 0;
  }, 120_000);
  const seconds = (performance.now() - start) / 1000;
  await ingest.close();
  const stored = await store.countSamples();
  await store.close();
  if (stored !== MESSAGES) throw new Error(`the ingest stored ${stored} of ${MESSAGES} samples`);
  return MESSAGES / seconds;
}

/**
 * The ingest's own work for one message, without the broker: parseMqttMessage on the same payloads,
 * and store.writeSamples in batches of the size the ingest forms under load. Microseconds per message.
 */
async function partsRun(run: number): Promise<{ parse: number; store: number }> {
  const spec: SubscriptionSpec = { filter: 'parts/+', tag: 'bench.{2}', format: 'number' };
  const payloads = Array.from({ length: 1000 }, (_, i) => Buffer.from((i * 0.5).toFixed(1)));
  const samples: SampleInput[] = [];
  let start = performance.now();
  for (let i = 0; i < MESSAGES; i++) {
    const parsed = parseMqttMessage(
      spec,
      `parts/v${i % 10}`,
      payloads[i % 1000] ?? Buffer.alloc(0),
      {
        receivedAt: T0 + i,
        now: T0 + i,
        maxFutureMs: 60_000,
        maxPayloadBytes: 1024,
      },
    );
    for (const sample of parsed.samples) samples.push(sample);
  }
  const parse = ((performance.now() - start) * 1000) / MESSAGES;
  const store = openSqliteStore({ path: join(work, `parts-${run}.db`) });
  start = performance.now();
  for (let i = 0; i < samples.length; i += PARTS_BATCH) {
    await store.writeSamples(samples.slice(i, i + PARTS_BATCH));
  }
  const write = ((performance.now() - start) * 1000) / MESSAGES;
  await store.close();
  return { parse, store: write };
}

try {
  say('# Ingest benchmark');
  say('');
  say(machineLine());
  say(`Broker: mosquitto (spawned on loopback). Medians of ${MQTT_RUNS} MQTT runs.`);
  say('');

  const bare: number[] = [];
  const ingest: number[] = [];
  const ratios: number[] = [];
  const parse: number[] = [];
  const write: number[] = [];
  for (let run = 0; run < MQTT_RUNS; run++) {
    // Interleaved, and in turns first, so slow spells of the shared machine favour neither.
    let b: number;
    let i: number;
    if (run % 2 === 0) {
      b = await bareRun(run);
      i = await ingestRun(run);
    } else {
      i = await ingestRun(run);
      b = await bareRun(run);
    }
    // The parts are timed in the same run, so the breakdown matches the machine's state then.
    const parts = await partsRun(run);
    parse.push(parts.parse);
    write.push(parts.store);
    bare.push(b);
    ingest.push(i);
    ratios.push(i / b);
    console.log(
      `  run ${run + 1}: bare ${b.toFixed(0)}/s, ingest ${i.toFixed(0)}/s, parse ${parts.parse.toFixed(1)} µs, store ${parts.store.toFixed(1)} µs`,
    );
  }
  say(`## MQTT, QoS 1, one value per message (${MESSAGES.toLocaleString('en')} messages per run)`);
  say('');
  say('| subscriber | messages per second (median) | µs per message |');
  say('| --- | ---: | ---: |');
  say(
    `| bare mqtt.js subscriber (acknowledges at once, stores nothing) | ${median(bare).toFixed(0)} | ${(1e6 / median(bare)).toFixed(1)} |`,
  );
  say(
    `| trueshift MQTT ingest (PUBACK after the SQLite commit) | ${median(ingest).toFixed(0)} | ${(1e6 / median(ingest)).toFixed(1)} |`,
  );
  say('');
  say(
    `Ratio ingest / bare: median of the per-run ratios ${median(ratios).toFixed(2)}; ratio of the medians ${(median(ingest) / median(bare)).toFixed(2)}.`,
  );
  say('');
  say(
    `The ingest's own work per message, timed without the broker in the same runs (medians): parseMqttMessage (packages/formats) ${median(parse).toFixed(1)} µs, store.writeSamples at ${PARTS_BATCH} samples per transaction ${median(write).toFixed(1)} µs.`,
  );
  say('');
  say('| run | bare (msg/s) | ingest (msg/s) | ratio | parse (µs) | store (µs) |');
  say('| ---: | ---: | ---: | ---: | ---: | ---: |');
  for (let run = 0; run < MQTT_RUNS; run++) {
    say(
      `| ${run + 1} | ${(bare[run] ?? 0).toFixed(0)} | ${(ingest[run] ?? 0).toFixed(0)} | ${(ratios[run] ?? 0).toFixed(2)} | ${(parse[run] ?? 0).toFixed(1)} | ${(write[run] ?? 0).toFixed(1)} |`,
    );
  }
  say('');
  say(
    'CSV files (the drop folder and `trueshift import` both go through `importCsvFile`): see [import.md](import.md).',
  );
  report.write();
} finally {
  await broker.dispose();
  rmSync(work, { recursive: true, force: true });
}
