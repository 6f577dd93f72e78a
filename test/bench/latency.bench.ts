/**
 * End-to-end latency of the whole service (`trueshift start` as its own process, on the shipped
 * defaults but for the ports and paths): from a sample's QoS 1 publish to the evidence event and to
 * the alert event it causes on the event stream (/api/v1/events), while background tags stream at a
 * steady rate; and the resident memory with 10,000 more tags watched.
 *
 * Probe tags carry a mark and a clear shift; each probe sample is evaluated (an evidence event with
 * its sample time) and the third credible look opens the alert, so both are matched to the publish
 * of the sample behind them. The analyser follows the store every analysis.pollMs (1 s by default),
 * which is most of the latency measured here.
 *
 * Then, in a service of its own, the evidence queries over HTTP on a tag with 10^6 samples, cold and
 * cached, with autocannon, beside GET /health as the baseline.
 *
 * Run with `npm run build && npx tsx test/bench/latency.bench.ts`.
 */
import { mkdirSync, mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { request } from 'node:http';
import { cpus, tmpdir, totalmem } from 'node:os';
import { join } from 'node:path';
import { setTimeout as sleep } from 'node:timers/promises';
import { fileURLToPath } from 'node:url';
import autocannon from 'autocannon';
import { connectAsync } from 'mqtt';
import { seededRandom } from '@trueshift/stats';
import { openSqliteStore } from '@trueshift/store-sqlite';
import { requireBuiltCli } from '../helpers/cli-process.js';
import { startMosquitto } from '../helpers/mosquitto.js';
import { serviceProcess } from '../helpers/service-process.js';
import type { ServiceProcess } from '../helpers/service-process.js';
import { waitFor } from '../helpers/store-faults.js';

const RATE = Number(process.env.BENCH_LATENCY_RATE ?? 5000);
const SECONDS = Number(process.env.BENCH_LATENCY_SECONDS ?? 30);
const LOAD_TAGS = 100;
const PROBES = 50;
const HISTORY = 150;
const WATCHED = Number(process.env.BENCH_LATENCY_TAGS ?? 10_000);
const TICK_MS = 50;
const BIG_N = Number(process.env.BENCH_LATENCY_BIG_N ?? 1_000_000);
const BIG_AFTER = 30;
const RUNS = 3;
const CONNECTIONS = 2;
const CACHED_SECONDS = Number(process.env.BENCH_LATENCY_CACHED_SECONDS ?? 10);
const COLD_REQUESTS = 10;

function median(values: readonly number[]): number {
  return quantile(values, 0.5);
}

interface Run {
  mean: number;
  /** connections × duration / requests: the mean time per request, from the throughput. */
  perRequest: number;
  p50: number;
  p99: number;
  requests: number;
}

/** One autocannon run on loopback: `amount` requests, or `seconds` of them. */
async function cannon(url: string, bound: { amount: number } | { seconds: number }): Promise<Run> {
  const result = await autocannon({
    url,
    connections: CONNECTIONS,
    timeout: 120,
    ...('amount' in bound ? { amount: bound.amount } : { duration: bound.seconds }),
  });
  if (result.non2xx > 0 || result.errors > 0) {
    throw new Error(
      `${url}: ${String(result.non2xx)} non-2xx answers, ${String(result.errors)} errors`,
    );
  }
  return {
    mean: result.latency.average,
    perRequest: (CONNECTIONS * result.duration * 1000) / result.requests.total,
    p50: result.latency.p50,
    p99: result.latency.p99,
    requests: result.requests.total,
  };
}

function quantile(values: readonly number[], q: number): number {
  const sorted = [...values].sort((a, b) => a - b);
  return sorted[Math.min(sorted.length - 1, Math.floor(q * sorted.length))] ?? Number.NaN;
}

const lines: string[] = [];
const say = (line: string): void => {
  console.log(line);
  lines.push(line);
};

requireBuiltCli();
const broker = await startMosquitto();
const work = mkdtempSync(join(tmpdir(), 'trueshift-bench-latency-'));
let big: ServiceProcess | null = null;
const service = await serviceProcess({
  dir: work,
  brokerUrl: broker.url,
  clientId: 'bench-ingest',
});
try {
  const now0 = Date.now();
  // Sample times lie in the past so none is refused as from the future.
  const start = now0 - 6 * 3_600_000;
  const markAt = start + HISTORY * 1000;
  const rng = seededRandom(5);
  const probeTags = Array.from({ length: PROBES }, (_, i) => `bench/probe${String(i)}`);
  const seed = openSqliteStore({ path: service.storePath });
  for (const tag of probeTags) {
    await seed.upsertTag({ name: tag, settings: { kind: 'batch', inControlArl: 1e7 } }, now0);
    await seed.writeSamples(
      Array.from({ length: HISTORY }, (_, i) => ({
        tag,
        t: start + i * 1000,
        value: 10 + 0.1 * rng.normal(),
        quality: 192,
        source: 'bench',
        receivedAt: now0,
      })),
    );
    await seed.createMark(
      { tags: [tag], at: markAt, label: 'bench', direction: 'rise' },
      'bench',
      now0,
    );
  }
  await seed.close();
  await service.start();

  // The event stream, each event stamped on arrival.
  const arrivals: { event: string; data: string; at: number }[] = [];
  const stream = request(`${service.base}/api/v1/events`, {
    headers: { accept: 'text/event-stream' },
  });
  stream.on('response', (res) => {
    res.setEncoding('utf8');
    let buffer = '';
    res.on('data', (chunk: string) => {
      const at = Date.now();
      buffer += chunk;
      let end = buffer.indexOf('\n\n');
      while (end >= 0) {
        const block = buffer.slice(0, end);
        buffer = buffer.slice(end + 2);
        let event = 'message';
        let data = '';
        for (const line of block.split('\n')) {
          if (line.startsWith('event:')) event = line.slice(6).trim();
          else if (line.startsWith('data:')) data += line.slice(5).trim();
        }
        if (data !== '') arrivals.push({ event, data, at });
        end = buffer.indexOf('\n\n');
      }
    });
  });
  stream.end();

  const client = await connectAsync(broker.url, {
    clientId: 'bench-publisher',
    protocolVersion: 5,
  });
  const publishedAt = new Map<string, number>();
  const storedBefore = await service.metric('trueshift_samples_ingested_total');
  let sent = 0;
  let probeSent = 0;
  const began = Date.now();
  const pending: Promise<unknown>[] = [];
  const perTick = (RATE * TICK_MS) / 1000;
  for (let tick = 0; Date.now() < began + SECONDS * 1000; tick++) {
    for (let i = 0; i < perTick; i++, sent++) {
      const t = start + Math.floor(sent / LOAD_TAGS) * 10;
      pending.push(
        client.publishAsync(
          `trueshift/samples/bench/load${String(sent % LOAD_TAGS)}`,
          JSON.stringify({ value: rng.normal(), time: t }),
          { qos: 1 },
        ),
      );
    }
    // One probe sample every 100 ms, round the probe tags, up to the after-window cap of each mark.
    if (tick % (100 / TICK_MS) === 0 && probeSent < PROBES * 30) {
      const tag = probeTags[probeSent % PROBES] ?? '';
      const t = markAt + (Math.floor(probeSent / PROBES) + 1) * 1000;
      publishedAt.set(`${tag} ${String(t)}`, Date.now());
      pending.push(
        client.publishAsync(
          `trueshift/samples/${tag}`,
          JSON.stringify({ value: 11 + 0.1 * rng.normal(), time: t }),
          { qos: 1 },
        ),
      );
      probeSent++;
      sent++;
    }
    const wait = began + (tick + 1) * TICK_MS - Date.now();
    if (wait > 0) await sleep(wait);
    if (pending.length > 20_000) await Promise.all(pending.splice(0));
  }
  await Promise.all(pending.splice(0));
  const offeredSeconds = (Date.now() - began) / 1000;
  await waitFor(
    async () => (await service.metric('trueshift_samples_ingested_total')) >= storedBefore + sent,
    'everything stored',
    300_000,
  );
  const storedSeconds = (Date.now() - began) / 1000;
  await waitFor(
    async () => (await service.metric('trueshift_analyser_lag_samples')) === 0,
    'the analyser to catch up',
    300_000,
  );
  await sleep(2000);

  const evidence: number[] = [];
  const alerts: number[] = [];
  const lastEvidence = new Map<string, string>();
  for (const arrival of arrivals) {
    if (arrival.event === 'evidence') {
      const body = JSON.parse(arrival.data) as { tag: string; snapshot: { sampleTime: number } };
      const key = `${body.tag} ${String(body.snapshot.sampleTime)}`;
      const at = publishedAt.get(key);
      if (at !== undefined) evidence.push(arrival.at - at);
      lastEvidence.set(body.tag, key);
    } else if (arrival.event === 'alert') {
      const body = JSON.parse(arrival.data) as {
        change: string;
        alert: { tag: string; kind: string };
      };
      if (body.change !== 'opened' || body.alert.kind !== 'credible-shift') continue;
      const at = publishedAt.get(lastEvidence.get(body.alert.tag) ?? '');
      if (at !== undefined) alerts.push(arrival.at - at);
    }
  }

  const rssBefore = service.rssBytes();
  const watchedStart = Date.now();
  const perTag = 5;
  for (let round = 0; round < perTag; round++) {
    for (let i = 0; i < WATCHED; i++) {
      pending.push(
        client.publishAsync(
          `trueshift/samples/bench/watched${String(i)}`,
          JSON.stringify({ value: rng.normal(), time: start + round * 1000 }),
          { qos: 1 },
        ),
      );
      if (pending.length >= 5000) await Promise.all(pending.splice(0));
    }
  }
  await Promise.all(pending.splice(0));
  await waitFor(
    async () =>
      (await service.metric('trueshift_samples_ingested_total')) >=
      storedBefore + sent + WATCHED * perTag,
    'the watched tags stored',
    300_000,
  );
  await waitFor(
    async () => (await service.metric('trueshift_analyser_lag_samples')) === 0,
    'the analyser to take in the watched tags',
    300_000,
  );
  await sleep(3000);
  const rssAfter = service.rssBytes();
  const watchedSeconds = (Date.now() - watchedStart) / 1000;
  await client.endAsync();
  stream.destroy();
  await service.stop();

  // ---- evidence queries over HTTP on a tag with BIG_N samples, in a service of its own ----
  const bigWork = join(work, 'big');
  mkdirSync(bigWork);
  const bigService = await serviceProcess({
    dir: bigWork,
    brokerUrl: broker.url,
    clientId: 'bench-big',
  });
  big = bigService;
  const bigTag = 'bench/big';
  const bigStart = now0 - (BIG_N + 10 * BIG_AFTER) * 1000;
  const bigMarkAt = bigStart + BIG_N * 1000;
  const seedStarted = Date.now();
  const bigStore = openSqliteStore({ path: bigService.storePath });
  await bigStore.upsertTag({ name: bigTag, settings: { kind: 'batch', inControlArl: 1e7 } }, now0);
  const BATCH = 20_000;
  for (let from = 0; from < BIG_N; from += BATCH) {
    const n = Math.min(BATCH, BIG_N - from);
    await bigStore.writeSamples(
      Array.from({ length: n }, (_, i) => ({
        tag: bigTag,
        t: bigStart + (from + i) * 1000,
        value: 10 + 0.1 * rng.normal(),
        quality: 192,
        source: 'bench',
        receivedAt: now0,
      })),
    );
  }
  const bigMark = await bigStore.createMark(
    { tags: [bigTag], at: bigMarkAt, label: 'bench', direction: 'rise' },
    'bench',
    now0,
  );
  await bigStore.writeSamples(
    Array.from({ length: BIG_AFTER }, (_, i) => ({
      tag: bigTag,
      t: bigMarkAt + (i + 1) * 1000,
      value: 11 + 0.1 * rng.normal(),
      quality: 192,
      source: 'bench',
      receivedAt: now0,
    })),
  );
  await bigStore.close();
  const seedSeconds = (Date.now() - seedStarted) / 1000;
  const evidenceUrl = `${bigService.base}/api/v1/marks/${encodeURIComponent(bigMark.id)}/evidence/${encodeURIComponent(bigTag)}`;
  const targets = [
    { name: 'GET /health (baseline)', url: `${bigService.base}/health` },
    { name: 'GET /api/v1/marks/:id/evidence/:tag', url: evidenceUrl },
    { name: 'GET /api/v1/marks/:id/evidence/:tag/reference', url: `${evidenceUrl}/reference` },
  ];
  const analysedStarted = Date.now();
  await bigService.start(120_000);
  await waitFor(
    async () =>
      (await fetch(evidenceUrl)).status === 200 &&
      (await bigService.metric('trueshift_analyser_lag_samples')) === 0,
    'the evidence on the big tag',
    600_000,
  );
  const analysedSeconds = (Date.now() - analysedStarted) / 1000;
  const reference = (await (await fetch(`${evidenceUrl}/reference`)).json()) as {
    nHistory: number;
    nAfter: number;
  };
  const cold = new Map<string, Run[]>();
  const cached = new Map<string, Run[]>();
  for (let run = 0; run < RUNS; run++) {
    // Cold: the first requests after a restart, one restart per endpoint, the analyser included.
    for (const target of targets) {
      await bigService.stop();
      await bigService.start(120_000);
      const runs = cold.get(target.name) ?? [];
      runs.push(await cannon(target.url, { amount: COLD_REQUESTS }));
      cold.set(target.name, runs);
    }
    await waitFor(
      async () => (await bigService.metric('trueshift_analyser_lag_samples')) === 0,
      'the analyser after the restart',
      600_000,
    );
    // Cached: steady state, after a warm-up.
    for (const target of targets) {
      await cannon(target.url, { amount: 20 });
      const runs = cached.get(target.name) ?? [];
      runs.push(await cannon(target.url, { seconds: CACHED_SECONDS }));
      cached.set(target.name, runs);
    }
  }
  const bigRss = bigService.rssBytes();
  await bigService.stop();

  const cpu = cpus()[0]?.model ?? 'unknown CPU';
  say('# Latency and memory of the whole service');
  say('');
  say(
    `Machine: ${cpu}, ${String(cpus().length)} cores, ${(totalmem() / 2 ** 30).toFixed(0)} GiB, Node.js ${process.version}; ${new Date().toISOString()}.`,
  );
  say('');
  say(
    `Load: ${String(sent)} QoS 1 samples offered over ${offeredSeconds.toFixed(1)} s (${(sent / offeredSeconds).toFixed(0)}/s asked ${String(RATE)}/s, ${String(LOAD_TAGS)} load tags + ${String(PROBES)} marked probe tags); all stored after ${storedSeconds.toFixed(1)} s, so the service kept up with ${(sent / storedSeconds).toFixed(0)} samples/s end to end (the offered rate, not a ceiling). analysis.pollMs = 1000 (the default).`,
  );
  say('');
  say('| publish → event on /api/v1/events | n | p50 ms | p99 ms | max ms |');
  say('| --- | ---: | ---: | ---: | ---: |');
  say(
    `| evidence of a probe sample | ${String(evidence.length)} | ${String(quantile(evidence, 0.5))} | ${String(quantile(evidence, 0.99))} | ${String(Math.max(...evidence))} |`,
  );
  say(
    `| credible-shift alert opened | ${String(alerts.length)} | ${String(quantile(alerts, 0.5))} | ${String(quantile(alerts, 0.99))} | ${String(Math.max(...alerts))} |`,
  );
  say('');
  say(
    `Memory: RSS ${(rssBefore / 2 ** 20).toFixed(1)} MiB before and ${(rssAfter / 2 ** 20).toFixed(1)} MiB after ${String(WATCHED)} more tags were watched (${String(perTag)} samples each, taken in over ${watchedSeconds.toFixed(0)} s): about ${((rssAfter - rssBefore) / WATCHED).toFixed(0)} bytes per tag (one reading of RSS, garbage included).`,
  );
  say('');
  say(
    'Each mark settles once its alert opens (three credible looks), so a probe tag gives three evidence events and one alert. The 10,000 tags have 5 samples each: tags known to the store and the analyser with little history; a watch with a full history may cost more per tag. The publish → event figures are one run (not yet medians of several).',
  );
  say('');
  say('## Evidence queries over HTTP on a tag with 10^6 samples');
  say('');
  say(
    `A service of its own on one batch tag: ${String(BIG_N)} history samples, a mark and ${String(BIG_AFTER)} shifted samples after it, written into the store file (${seedSeconds.toFixed(1)} s) before the service started; the analyser had the evidence ${analysedSeconds.toFixed(1)} s after the start. The reference answer covers nHistory = ${String(reference.nHistory)}, nAfter = ${String(reference.nAfter)}. RSS with it: ${(bigRss / 2 ** 20).toFixed(1)} MiB.`,
  );
  say('');
  say(
    `autocannon ${String(CONNECTIONS)} connections on loopback. Cold: the first ${String(COLD_REQUESTS)} requests right after a restart of the service (one restart per endpoint, while the analyser loads the tag again). Cached: a ${String(CACHED_SECONDS)} s run in steady state after 20 warm-up requests. Each figure is the median over ${String(RUNS)} runs of that run's p50 / p99; GET /health with the same settings is the baseline, and ×health is the ratio of the means. autocannon's percentiles are whole milliseconds, so for the cached runs the mean is taken from the throughput (connections × duration / requests), and for the cold runs it is autocannon's mean of the 10 requests.`,
  );
  say('');
  say(
    '| endpoint | cold mean ms | cold p50 ms | cold p99 ms | cold ×health | cached mean ms | cached p50 ms | cached p99 ms | cached ×health | cached req/s |',
  );
  say('| --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |');
  const healthName = targets[0]?.name ?? '';
  const coldHealth = median((cold.get(healthName) ?? []).map((r) => r.mean));
  const cachedHealth = median((cached.get(healthName) ?? []).map((r) => r.perRequest));
  for (const target of targets) {
    const c = cold.get(target.name) ?? [];
    const w = cached.get(target.name) ?? [];
    const coldMean = median(c.map((r) => r.mean));
    const cachedMean = median(w.map((r) => r.perRequest));
    const rate = median(w.map((r) => r.requests / CACHED_SECONDS));
    say(
      `| ${target.name} | ${coldMean.toFixed(2)} | ${String(median(c.map((r) => r.p50)))} | ${String(median(c.map((r) => r.p99)))} | ${(coldMean / coldHealth).toFixed(1)} | ${cachedMean.toFixed(2)} | ${String(median(w.map((r) => r.p50)))} | ${String(median(w.map((r) => r.p99)))} | ${(cachedMean / cachedHealth).toFixed(1)} | ${rate.toFixed(1)} |`,
    );
  }
  say('');
  say(
    'The machine has few cores and the load generator shares them with the service, so the p99s of the fast routes are mostly scheduling noise. The reference route reads every sample before the mark on each request (no cache in the service), so cached there means the SQLite page cache and the OS file cache, not an answer cache.',
  );
  const out = fileURLToPath(new URL('./results/latency.md', import.meta.url));
  writeFileSync(out, `${lines.join('\n')}\n`);
  console.log(`\nWritten to ${out}`);
} finally {
  await service.stop().catch(() => undefined);
  await big?.stop().catch(() => undefined);
  await broker.dispose();
  rmSync(work, { recursive: true, force: true });
}
