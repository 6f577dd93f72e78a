/**
 * End-to-end latency of the whole service (`trueshift start` as its own process, on the shipped
 * defaults but for the ports and paths): from a sample's QoS 1 publish to the evidence event and to
 * the alert event it causes on the event stream (/api/v1/events), while background tags stream at a
 * steady rate; and the resident memory with 10,000 more tags watched.
 *
 * Probe tags carry a mark and a clear shift; each probe sample is evaluated (an evidence event with
 * its sample time) and the third credible look opens the alert, so both are matched to the publish
 * of the sample behind them. The analyser follows the store every analysis.pollMs (1 s by default),
 * which is most of the latency measured here. Several runs, each with probe tags of its own; the
 * baseline, in turn with them on the same broker: a bare mqtt.js subscriber receiving the same
 * load at the same rate, publish → receive of the same probe messages.
 *
 * Then, in a service of its own, the evidence queries over HTTP on a tag with 10^6 samples, cold and
 * cached, with autocannon, beside GET /health as the baseline; and the reference route's own cache:
 * a request whose answer is not cached yet beside the same request answered again.
 *
 * Run with `npm run build && npx tsx test/bench/latency.bench.ts`.
 */
import { mkdirSync, mkdtempSync, rmSync } from 'node:fs';
import { request } from 'node:http';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { setTimeout as sleep } from 'node:timers/promises';
import autocannon from 'autocannon';
import { connectAsync } from 'mqtt';
import type { MqttClient } from 'mqtt';
import { seededRandom } from '@trueshift/stats';
import { openSqliteStore } from '@trueshift/store-sqlite';
import { requireBuiltCli } from '../helpers/cli-process.js';
import { startMosquitto } from '../helpers/mosquitto.js';
import { serviceProcess } from '../helpers/service-process.js';
import type { ServiceProcess } from '../helpers/service-process.js';
import { waitFor } from '../helpers/store-faults.js';
import { benchReport, machineLine, median, quantile } from './bench-kit.js';

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
const LATENCY_RUNS = Number(process.env.BENCH_LATENCY_RUNS ?? 3);
const CONNECTIONS = 2;
const CACHED_SECONDS = Number(process.env.BENCH_LATENCY_CACHED_SECONDS ?? 10);
const COLD_REQUESTS = 10;
/** Reference answers built afresh per run (each a query not asked before), and answered again. */
const REFERENCE_FRESH = 3;
const REFERENCE_AGAIN = 50;

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

interface Offered {
  sent: number;
  seconds: number;
}

/**
 * RATE messages a second for SECONDS, in ticks of TICK_MS: `load(i)` gives the i-th background
 * message, and every 100 ms `probe(n)` the n-th probe (or null when there are no more), whose
 * publish time is handed to `published`.
 */
async function offer(
  client: MqttClient,
  load: (i: number) => { topic: string; payload: string },
  probe: (n: number) => { topic: string; payload: string; key: string } | null,
  published: Map<string, number>,
): Promise<Offered> {
  const began = Date.now();
  const pending: Promise<unknown>[] = [];
  const perTick = (RATE * TICK_MS) / 1000;
  let sent = 0;
  let probes = 0;
  for (let tick = 0; Date.now() < began + SECONDS * 1000; tick++) {
    for (let i = 0; i < perTick; i++, sent++) {
      const message = load(sent);
      pending.push(client.publishAsync(message.topic, message.payload, { qos: 1 }));
    }
    const next = tick % (100 / TICK_MS) === 0 ? probe(probes) : null;
    if (next !== null) {
      published.set(next.key, Date.now());
      pending.push(client.publishAsync(next.topic, next.payload, { qos: 1 }));
      probes++;
      sent++;
    }
    const wait = began + (tick + 1) * TICK_MS - Date.now();
    if (wait > 0) await sleep(wait);
    if (pending.length > 20_000) await Promise.all(pending.splice(0));
  }
  await Promise.all(pending.splice(0));
  return { sent, seconds: (Date.now() - began) / 1000 };
}

interface LatencyRun {
  bare: number[];
  evidence: number[];
  alerts: number[];
  offered: Offered;
  storedSeconds: number;
}

const pct = (values: readonly number[], q: number): number => quantile(values, q);

const report = benchReport('latency');
const { say } = report;

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
  // Probe tags of their own for every run: a mark settles once its alert opens.
  const probeTags = Array.from({ length: LATENCY_RUNS }, (_, run) =>
    Array.from({ length: PROBES }, (_, i) => `bench/run${String(run)}/probe${String(i)}`),
  );
  const seed = openSqliteStore({ path: service.storePath });
  for (const tag of probeTags.flat()) {
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
  // The baseline's subscriber: the same broker, a persistent QoS 1 session as the ingest has, and
  // nothing done with a message but noting when it came.
  const bareArrivals = new Map<string, number>();
  const bareClient = await connectAsync(broker.url, {
    clientId: 'bench-bare-subscriber',
    protocolVersion: 5,
    clean: false,
    properties: { sessionExpiryInterval: 600 },
  });
  bareClient.on('message', (topic, payload) => {
    if (topic.includes('/probe')) bareArrivals.set(`${topic} ${payload.toString()}`, Date.now());
  });
  await bareClient.subscribeAsync('bench/bare/#', { qos: 1 });

  // Load sample times go on from run to run, so no (tag, time) is sent twice.
  let loadCount = 0;
  const loadMessage = (prefix: string) => (): { topic: string; payload: string } => {
    const i = loadCount++;
    return {
      topic: `${prefix}/load${String(i % LOAD_TAGS)}`,
      payload: JSON.stringify({
        value: rng.normal(),
        time: start + Math.floor(i / LOAD_TAGS) * 10,
      }),
    };
  };
  const probeTime = (n: number): number => markAt + (Math.floor(n / PROBES) + 1) * 1000;
  const runs: LatencyRun[] = [];
  for (let run = 0; run < LATENCY_RUNS; run++) {
    // The baseline first in even runs and second in odd ones, so slow spells favour neither.
    const order = run % 2 === 0 ? (['bare', 'service'] as const) : (['service', 'bare'] as const);
    const bare: number[] = [];
    let serviceRun: Omit<LatencyRun, 'bare'> | null = null;
    for (const which of order) {
      if (which === 'bare') {
        const published = new Map<string, number>();
        const next = loadMessage('bench/bare');
        await offer(
          client,
          () => next(),
          (n) => {
            if (n >= PROBES * 30) return null;
            const topic = `bench/bare/probe${String(n % PROBES)}`;
            const payload = JSON.stringify({ value: 11 + 0.1 * rng.normal(), time: probeTime(n) });
            return { topic, payload, key: `${topic} ${payload}` };
          },
          published,
        );
        await waitFor(
          () => [...published.keys()].every((key) => bareArrivals.has(key)),
          'every bare probe received',
          120_000,
        );
        for (const [key, at] of published) bare.push((bareArrivals.get(key) ?? Number.NaN) - at);
        continue;
      }
      const published = new Map<string, number>();
      const storedBefore = await service.metric('trueshift_samples_ingested_total');
      const seen = arrivals.length;
      const next = loadMessage('trueshift/samples/bench');
      const tags = probeTags[run] ?? [];
      const offerStart = Date.now();
      const offered = await offer(
        client,
        () => next(),
        (n) => {
          if (n >= PROBES * 30) return null;
          const tag = tags[n % PROBES] ?? '';
          const t = probeTime(n);
          return {
            topic: `trueshift/samples/${tag}`,
            payload: JSON.stringify({ value: 11 + 0.1 * rng.normal(), time: t }),
            key: `${tag} ${String(t)}`,
          };
        },
        published,
      );
      await waitFor(
        async () =>
          (await service.metric('trueshift_samples_ingested_total')) >= storedBefore + offered.sent,
        'everything stored',
        300_000,
      );
      const storedSeconds = (Date.now() - offerStart) / 1000;
      await waitFor(
        async () => (await service.metric('trueshift_analyser_lag_samples')) === 0,
        'the analyser to catch up',
        300_000,
      );
      await sleep(2000);
      const evidence: number[] = [];
      const alerts: number[] = [];
      const lastEvidence = new Map<string, string>();
      for (const arrival of arrivals.slice(seen)) {
        if (arrival.event === 'evidence') {
          const body = JSON.parse(arrival.data) as {
            tag: string;
            snapshot: { sampleTime: number };
          };
          const key = `${body.tag} ${String(body.snapshot.sampleTime)}`;
          const at = published.get(key);
          if (at !== undefined) evidence.push(arrival.at - at);
          lastEvidence.set(body.tag, key);
        } else if (arrival.event === 'alert') {
          const body = JSON.parse(arrival.data) as {
            change: string;
            alert: { tag: string; kind: string };
          };
          if (body.change !== 'opened' || body.alert.kind !== 'credible-shift') continue;
          const at = published.get(lastEvidence.get(body.alert.tag) ?? '');
          if (at !== undefined) alerts.push(arrival.at - at);
        }
      }
      serviceRun = { evidence, alerts, offered, storedSeconds };
    }
    if (serviceRun === null) throw new Error('no service run');
    runs.push({ ...serviceRun, bare });
    console.log(
      `  run ${String(run + 1)}: bare p50 ${String(pct(bare, 0.5))} ms, evidence p50 ${String(pct(serviceRun.evidence, 0.5))} ms (n ${String(serviceRun.evidence.length)}), alert p50 ${String(pct(serviceRun.alerts, 0.5))} ms (n ${String(serviceRun.alerts.length)})`,
    );
  }
  await bareClient.endAsync();
  const pending: Promise<unknown>[] = [];
  const storedBefore = await service.metric('trueshift_samples_ingested_total');
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
      (await service.metric('trueshift_samples_ingested_total')) >= storedBefore + WATCHED * perTag,
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
  // The reference route's cache: a query not asked before builds its answer from the store; the
  // same query again is answered from memory. GET /health one request at a time is the baseline.
  const timedGet = async (url: string): Promise<number> => {
    const began = performance.now();
    const response = await fetch(url);
    await response.arrayBuffer();
    if (response.status !== 200) throw new Error(`${url}: ${String(response.status)}`);
    return performance.now() - began;
  };
  const fresh: number[] = [];
  const again: number[] = [];
  const health: number[] = [];
  for (let run = 0; run < RUNS; run++) {
    let url = '';
    for (let k = 0; k < REFERENCE_FRESH; k++) {
      url = `${evidenceUrl}/reference?bins=${String(100 + run * REFERENCE_FRESH + k)}`;
      fresh.push(await timedGet(url));
    }
    for (let k = 0; k < REFERENCE_AGAIN; k++) again.push(await timedGet(url));
    for (let k = 0; k < REFERENCE_AGAIN; k++)
      health.push(await timedGet(`${bigService.base}/health`));
  }
  const bigRss = bigService.rssBytes();
  await bigService.stop();

  say('# Latency and memory of the whole service');
  say('');
  say(machineLine());
  say('');
  const offeredRate = median(runs.map((r) => r.offered.sent / r.offered.seconds));
  const keptUp = median(runs.map((r) => r.offered.sent / r.storedSeconds));
  say(
    `Load per run: QoS 1 samples for ${String(SECONDS)} s at ${String(RATE)}/s asked (${offeredRate.toFixed(0)}/s offered, median over runs), ${String(LOAD_TAGS)} load tags + ${String(PROBES)} marked probe tags of the run's own; the service stored everything at ${keptUp.toFixed(0)} samples/s end to end (median; the offered rate, not a ceiling). analysis.pollMs = 1000 (the default). ${String(LATENCY_RUNS)} runs; each figure is the median over the runs of that run's percentile.`,
  );
  say(
    `Baseline, in turn with the service in every run (first in even runs, second in odd ones): the same publisher, rate and probe cadence on the same mosquitto, to topics a bare mqtt.js subscriber (QoS 1, persistent session) receives and does nothing with; publish → receive of its probe messages. The ratios are medians of the per-run ratios to the baseline's p50 / p99.`,
  );
  say('');
  say(
    '| publish → | n per run | p50 ms | p99 ms | max ms | p50 / baseline p50 | p99 / baseline p99 |',
  );
  say('| --- | ---: | ---: | ---: | ---: | ---: | ---: |');
  const row = (name: string, pick: (r: LatencyRun) => number[]): void => {
    if (runs.some((r) => pick(r).length === 0)) {
      say(`| ${name} | 0 in some run | — | — | — | — | — |`);
      return;
    }
    const p50 = median(runs.map((r) => pct(pick(r), 0.5)));
    const p99 = median(runs.map((r) => pct(pick(r), 0.99)));
    const max = median(runs.map((r) => Math.max(...pick(r))));
    const n = median(runs.map((r) => pick(r).length));
    const r50 = median(runs.map((r) => pct(pick(r), 0.5) / pct(r.bare, 0.5)));
    const r99 = median(runs.map((r) => pct(pick(r), 0.99) / pct(r.bare, 0.99)));
    say(
      `| ${name} | ${String(n)} | ${p50.toFixed(0)} | ${p99.toFixed(0)} | ${max.toFixed(0)} | ${r50.toFixed(1)} | ${r99.toFixed(1)} |`,
    );
  };
  row('baseline: receive by a bare mqtt.js subscriber', (r) => r.bare);
  row('evidence event of a probe sample on /api/v1/events', (r) => r.evidence);
  row('credible-shift alert opened on /api/v1/events', (r) => r.alerts);
  say('');
  say('| run | baseline p50 / p99 ms | evidence p50 / p99 ms | alert p50 / p99 ms | offered /s |');
  say('| ---: | ---: | ---: | ---: | ---: |');
  runs.forEach((r, i) => {
    say(
      `| ${String(i + 1)} | ${String(pct(r.bare, 0.5))} / ${String(pct(r.bare, 0.99))} | ${String(pct(r.evidence, 0.5))} / ${String(pct(r.evidence, 0.99))} | ${String(pct(r.alerts, 0.5))} / ${String(pct(r.alerts, 0.99))} | ${(r.offered.sent / r.offered.seconds).toFixed(0)} |`,
    );
  });
  say('');
  say(
    `Memory: RSS ${(rssBefore / 2 ** 20).toFixed(1)} MiB before and ${(rssAfter / 2 ** 20).toFixed(1)} MiB after ${String(WATCHED)} more tags were watched (${String(perTag)} samples each, taken in over ${watchedSeconds.toFixed(0)} s): about ${((rssAfter - rssBefore) / WATCHED).toFixed(0)} bytes per tag (one reading of RSS, garbage included; memory.md measures the analyser alone after forced collections, with live watches).`,
  );
  say('');
  say(
    `Each mark settles once its alert opens (three credible looks), so a probe tag gives three evidence events and one alert. The ${WATCHED.toLocaleString('en')} tags have ${String(perTag)} samples each: tags known to the store and the analyser with little history.`,
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
    'The machine has few cores and the load generator shares them with the service, so the p99s of the fast routes are mostly scheduling noise. The reference route keeps its answers per (mark, revision, tag, latest evidence snapshot, query) in a bounded cache: cold above includes the first request after a restart building the answer (the other cold requests share or reuse it), cached is answered from memory.',
  );
  say('');
  say('### The reference route: an answer built vs the same answer again');
  say('');
  say(
    `One request at a time (fetch, body read). Built: ${String(REFERENCE_FRESH)} queries per run not asked before (another \`bins\`), each read from the store; again: the last of them asked ${String(REFERENCE_AGAIN)} times more. Medians over ${String(RUNS)} runs' requests, beside GET /health asked the same way.`,
  );
  say('');
  say('| request | n | median ms | p99 ms | ×health |');
  say('| --- | ---: | ---: | ---: | ---: |');
  const healthMs = median(health);
  for (const [name, times] of [
    ['GET /health (baseline)', health],
    ['reference, answer built (not cached yet)', fresh],
    ['reference, the same answer again (cached)', again],
  ] as const) {
    say(
      `| ${name} | ${String(times.length)} | ${median(times).toFixed(2)} | ${quantile(times, 0.99).toFixed(2)} | ${(median(times) / healthMs).toFixed(1)} |`,
    );
  }
  say('');
  say(`Built / cached: ${(median(fresh) / median(again)).toFixed(0)}× (medians).`);
  report.write();
} finally {
  await service.stop().catch(() => undefined);
  await big?.stop().catch(() => undefined);
  await broker.dispose();
  rmSync(work, { recursive: true, force: true });
}
