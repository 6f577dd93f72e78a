/**
 * A soak of the whole service as its own process: ~90 s of QoS 1 samples at a steady 500 per second
 * over 50 tags through a real Mosquitto. Memory (VmRSS from /proc) and the analyser's lag (GET
 * /metrics) are sampled every few seconds; memory must stay flat after the warm-up and the analyser
 * must keep up, and at the end every sample is stored once.
 */
import { mkdtemp, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { setTimeout as sleep } from 'node:timers/promises';
import { connectAsync } from 'mqtt';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { requireBuiltCli } from './helpers/cli-process.js';
import { startMosquitto } from './helpers/mosquitto.js';
import type { Mosquitto } from './helpers/mosquitto.js';
import { serviceProcess } from './helpers/service-process.js';
import type { ServiceProcess } from './helpers/service-process.js';
import { waitFor } from './helpers/store-faults.js';

const TAGS = 50;
const RATE = 500;
const SECONDS = 90;
const TICK_MS = 100;
const PROBE_MS = 3000;
const HEAP_MB = 96;

let broker: Mosquitto | undefined;
let service: ServiceProcess | undefined;
let dir: string | undefined;

beforeAll(async () => {
  requireBuiltCli();
  broker = await startMosquitto();
  dir = await mkdtemp(join(tmpdir(), 'trueshift-soak-'));
});

afterAll(async () => {
  if (service !== undefined) await service.kill('SIGKILL').catch(() => undefined);
  await broker?.dispose();
  if (dir !== undefined) await rm(dir, { recursive: true, force: true });
});

function median(values: readonly number[]): number {
  const sorted = [...values].sort((a, b) => a - b);
  return sorted[Math.floor(sorted.length / 2)] ?? Number.NaN;
}

interface Probe {
  at: number;
  rss: number;
  lag: number;
  stored: number;
}

describe('soak', () => {
  it(`keeps memory flat and the analyser up to date at ${String(RATE)} samples/s for ${String(SECONDS)} s`, async () => {
    if (broker === undefined || dir === undefined) throw new Error('setup');
    const running = await serviceProcess({
      dir,
      brokerUrl: broker.url,
      clientId: 'soak-ingest',
      settings: { analysis: { pollMs: 500 } },
      // V8 grows an unconstrained heap lazily, so RSS would climb for minutes with garbage alone and
      // say nothing about a leak; with a small old space a leak ends in an out-of-memory crash here.
      env: { NODE_OPTIONS: `--max-old-space-size=${String(HEAP_MB)}` },
    });
    service = running;
    await running.start();

    const client = await connectAsync(broker.url, {
      clientId: 'soak-publisher',
      protocolVersion: 5,
    });
    // Sample times lie in the past, one second apart per tag, so none is refused as from the future.
    const start = Date.now() - 2 * 3_600_000;
    const perTick = (RATE * TICK_MS) / 1000;
    let sent = 0;
    let acknowledged = 0;
    const began = Date.now();
    const stopAt = began + SECONDS * 1000;
    const pending: Promise<unknown>[] = [];
    const publishing = (async () => {
      // Ticks keep to the wall clock, so a slow tick is made up rather than the rate drifting down.
      for (let tick = 0; Date.now() < stopAt; tick++) {
        for (let i = 0; i < perTick; i++, sent++) {
          const tag = `trueshift/samples/soak/t${String(sent % TAGS)}`;
          const t = start + Math.floor(sent / TAGS) * 1000;
          pending.push(
            client
              .publishAsync(tag, JSON.stringify({ value: Math.sin(sent / 97), time: t }), {
                qos: 1,
              })
              .then(() => acknowledged++),
          );
        }
        const wait = began + (tick + 1) * TICK_MS - Date.now();
        if (wait > 0) await sleep(wait);
      }
    })();

    const probes: Probe[] = [];
    const probing = (async () => {
      while (Date.now() < stopAt) {
        await sleep(PROBE_MS);
        probes.push({
          at: Math.round((Date.now() - began) / 1000),
          rss: running.rssBytes(),
          lag: await running.metric('trueshift_analyser_lag_samples'),
          stored: await running.metric('trueshift_samples_ingested_total'),
        });
      }
    })();
    await Promise.all([publishing, probing]);
    const elapsed = (Date.now() - began) / 1000;
    await Promise.all(pending);
    await client.endAsync();
    await waitFor(
      async () => (await running.metric('trueshift_samples_ingested_total')) === sent,
      `all ${String(sent)} samples stored`,
      60_000,
    );
    await waitFor(
      async () => (await running.metric('trueshift_analyser_lag_samples')) === 0,
      'the analyser caught up',
      30_000,
    );

    // The first 15 s are warm-up: the JIT, SQLite's page cache and the analyser's per-tag state.
    const settled = probes.filter((p) => p.at >= 15);
    const third = Math.floor(settled.length / 3);
    const first = median(settled.slice(0, third).map((p) => p.rss));
    const last = median(settled.slice(-third).map((p) => p.rss));
    const lags = probes.map((p) => p.lag);
    const mb = (bytes: number): string => (bytes / 2 ** 20).toFixed(1);
    console.info(
      [
        `soak: ${String(sent)} samples in ${elapsed.toFixed(1)} s ` +
          `(${(sent / elapsed).toFixed(0)}/s offered, ${String(acknowledged)} acknowledged by the broker)`,
        `  RSS median first third ${mb(first)} MiB, last third ${mb(last)} MiB ` +
          `(${(((last - first) / first) * 100).toFixed(1)} %), max ${mb(Math.max(...probes.map((p) => p.rss)))} MiB`,
        `  analyser lag: median ${String(median(lags))}, max ${String(Math.max(...lags))} samples`,
        ...probes.map(
          (p) =>
            `  t=${String(p.at)}s rss=${mb(p.rss)}MiB lag=${String(p.lag)} stored=${String(p.stored)}`,
        ),
      ].join('\n'),
    );

    expect(sent / elapsed).toBeGreaterThan(RATE * 0.9);
    expect(third).toBeGreaterThanOrEqual(3);
    expect(last).toBeLessThanOrEqual(first * 1.3);
    // Bounded: never more than ten seconds of input behind.
    expect(Math.max(...lags)).toBeLessThan(RATE * 10);
    expect(running.stderr()).not.toMatch(/"level":(50|60)/);
    expect(await running.stop()).toBe(0);
    service = undefined;
  }, 180_000);
});
