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
 * Run with `npm run build && npx tsx test/bench/latency.bench.ts`.
 */
import { writeFileSync, mkdtempSync, rmSync } from 'node:fs';
import { request } from 'node:http';
import { cpus, tmpdir, totalmem } from 'node:os';
import { join } from 'node:path';
import { setTimeout as sleep } from 'node:timers/promises';
import { fileURLToPath } from 'node:url';
import { connectAsync } from 'mqtt';
import { seededRandom } from '@trueshift/stats';
import { openSqliteStore } from '@trueshift/store-sqlite';
import { requireBuiltCli } from '../helpers/cli-process.js';
import { startMosquitto } from '../helpers/mosquitto.js';
import { serviceProcess } from '../helpers/service-process.js';
import { waitFor } from '../helpers/store-faults.js';

const RATE = Number(process.env.BENCH_LATENCY_RATE ?? 5000);
const SECONDS = Number(process.env.BENCH_LATENCY_SECONDS ?? 30);
const LOAD_TAGS = 100;
const PROBES = 50;
const HISTORY = 150;
const WATCHED = Number(process.env.BENCH_LATENCY_TAGS ?? 10_000);
const TICK_MS = 50;

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
  await client.endAsync();
  stream.destroy();

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
    `Memory: RSS ${(rssBefore / 2 ** 20).toFixed(1)} MiB before and ${(rssAfter / 2 ** 20).toFixed(1)} MiB after ${String(WATCHED)} more tags were watched (${String(perTag)} samples each, taken in over ${((Date.now() - watchedStart) / 1000).toFixed(0)} s): about ${((rssAfter - rssBefore) / WATCHED).toFixed(0)} bytes per tag (one reading of RSS, garbage included).`,
  );
  say('');
  say(
    'Each mark settles once its alert opens (three credible looks), so a probe tag gives three evidence events and one alert. The 10,000 tags have 5 samples each: tags known to the store and the analyser with little history; a watch with a full history may cost more per tag. Not measured here yet: evidence query latency over HTTP for a tag with 10^6 samples (cold and cached) with a load generator.',
  );
  const out = fileURLToPath(new URL('./results/latency.md', import.meta.url));
  writeFileSync(out, `${lines.join('\n')}\n`);
  console.log(`\nWritten to ${out}`);
} finally {
  await service.stop().catch(() => undefined);
  await broker.dispose();
  rmSync(work, { recursive: true, force: true });
}
