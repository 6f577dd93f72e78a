/**
 * Samples per second through one, two and three instances of `trueshift start` (the built files,
 * each its own process) sharing one PostgreSQL database and one MQTT 5 shared subscription: a
 * burst of QoS 1 samples for many tags is published as fast as the broker takes it, and the clock
 * stops when every sample is stored, and again when every tag's analyser has folded in its last
 * sample. Each figure is the median of several runs, each run on a fresh database; the ratio is
 * against one instance measured in the same run of the benchmark.
 *
 * Run with `npm run build && npx tsx test/bench/cluster.bench.ts`.
 */
import { mkdir, mkdtemp, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { connectAsync } from 'mqtt';
import { openPostgresStore } from '@trueshift/store-postgres';
import type { PostgresStore } from '@trueshift/store-postgres';
import { requireBuiltCli } from '../helpers/cli-process.js';
import { startMosquitto } from '../helpers/mosquitto.js';
import { createTestDatabase } from '../helpers/postgres.js';
import { serviceProcess } from '../helpers/service-process.js';
import type { ServiceProcess } from '../helpers/service-process.js';
import { waitFor } from '../helpers/store-faults.js';
import { benchReport, machineLine, median } from './bench-kit.js';

const SAMPLES = Number(process.env.BENCH_CLUSTER_SAMPLES ?? 40_000);
const TAGS = Number(process.env.BENCH_CLUSTER_TAGS ?? 400);
const RUNS = Number(process.env.BENCH_CLUSTER_RUNS ?? 3);
const SHARDS = 32;
const WINDOW = 500;

interface RunResult {
  storedPerSec: number;
  analysedPerSec: number;
}

/** Every tag's analyser state has reached the tag's last sample. */
async function allAnalysed(store: PostgresStore, lastSeq: Map<string, number>): Promise<boolean> {
  const states = await store.listAnalyserState('shard:');
  const reached = new Map<string, number>();
  for (const state of states) {
    const at = state.key.indexOf(':tag:');
    if (at >= 0) reached.set(state.key.slice(at + ':tag:'.length), state.lastSeq);
  }
  for (const [tag, seq] of lastSeq) if ((reached.get(tag) ?? 0) < seq) return false;
  return true;
}

async function oneRun(instances: number, run: number): Promise<RunResult> {
  const db = await createTestDatabase('bench');
  const broker = await startMosquitto();
  const dir = await mkdtemp(join(tmpdir(), 'trueshift-bench-cluster-'));
  const nodes: ServiceProcess[] = [];
  const observer = await openPostgresStore({ url: db.url, shards: SHARDS, instance: 'bench' });
  try {
    for (let i = 0; i < instances; i++) {
      const work = join(dir, `node${String(i)}`);
      await mkdir(work, { recursive: true });
      nodes.push(
        await serviceProcess({
          dir: work,
          brokerUrl: broker.url,
          clientId: `bench-${String(run)}`,
          settings: {
            store: { kind: 'postgres', url: db.url, shards: SHARDS },
            cluster: { instance: `node${String(i)}`, leaseMs: 4000, renewMs: 500 },
            mqtt: { sharedGroup: 'trueshift' },
            analysis: { pollMs: 200 },
          },
        }),
      );
    }
    await Promise.all(nodes.map((node) => node.start(60_000)));
    // Wait until the shards are shared out, so no instance is still taking them over mid-run.
    await waitFor(
      async () => {
        const now = Date.now();
        const owners = new Set(
          (await observer.listLeases()).filter((l) => l.expiresAt > now).map((l) => l.owner),
        );
        return owners.size === instances;
      },
      'the shards shared out',
      30_000,
    );

    const start = Date.now() - 60 * 60_000;
    const publisher = await connectAsync(broker.url, {
      clientId: `bench-publisher-${String(run)}`,
      protocolVersion: 5,
    });
    const began = performance.now();
    let inFlight: Promise<unknown>[] = [];
    for (let i = 0; i < SAMPLES; i++) {
      const tag = `bench/unit${String(i % TAGS)}/flow`;
      const t = start + Math.floor(i / TAGS) * 1000;
      inFlight.push(
        publisher.publishAsync(
          `trueshift/samples/${tag}`,
          JSON.stringify({ value: 10 + Math.sin(i), time: t }),
          { qos: 1 },
        ),
      );
      if (inFlight.length >= WINDOW) {
        await Promise.all(inFlight);
        inFlight = [];
      }
    }
    await Promise.all(inFlight);
    await publisher.endAsync();
    await waitFor(
      async () => (await observer.countSamples()) >= SAMPLES,
      'every sample stored',
      600_000,
    );
    const storedMs = performance.now() - began;

    const lastSeq = new Map<string, number>();
    for (let after = 0; ;) {
      const page = await observer.samplesAfter(after, 20_000);
      if (page.length === 0) break;
      for (const s of page) lastSeq.set(s.tag, s.seq);
      after = page[page.length - 1]?.seq ?? after;
    }
    await waitFor(() => allAnalysed(observer, lastSeq), 'every tag analysed', 600_000);
    const analysedMs = performance.now() - began;
    for (const node of nodes) await node.stop();
    nodes.length = 0;
    return {
      storedPerSec: SAMPLES / (storedMs / 1000),
      analysedPerSec: SAMPLES / (analysedMs / 1000),
    };
  } finally {
    for (const node of nodes) await node.kill('SIGKILL').catch(() => undefined);
    await observer.close();
    await broker.dispose();
    await db.drop();
    await rm(dir, { recursive: true, force: true });
  }
}

async function main(): Promise<void> {
  requireBuiltCli();
  const report = benchReport('cluster');
  report.say('# Several instances on one PostgreSQL database');
  report.say('');
  report.say(machineLine());
  report.say('');
  report.say(
    `Each run: ${String(SAMPLES)} QoS 1 samples over ${String(TAGS)} tags, published as fast as the broker (Mosquitto, on the same machine) takes them with ${String(WINDOW)} in flight, into N instances of \`trueshift start\` sharing one PostgreSQL database (${String(SHARDS)} shards) and the shared subscription $share/trueshift/…; stored = every sample in the database; analysed = every tag's analyser past its last sample. Median of ${String(RUNS)} runs, each on a fresh database and broker.`,
  );
  report.say('');
  report.say('| instances | stored samples/s | × one | analysed samples/s | × one | runs |');
  report.say('| ---: | ---: | ---: | ---: | ---: | --- |');
  let one: RunResult | null = null;
  for (const instances of [1, 2, 3]) {
    const results: RunResult[] = [];
    for (let run = 0; run < RUNS; run++) results.push(await oneRun(instances, run));
    const stored = median(results.map((r) => r.storedPerSec));
    const analysed = median(results.map((r) => r.analysedPerSec));
    one ??= { storedPerSec: stored, analysedPerSec: analysed };
    report.say(
      `| ${String(instances)} | ${stored.toFixed(0)} | ${(stored / one.storedPerSec).toFixed(2)} | ${analysed.toFixed(0)} | ${(analysed / one.analysedPerSec).toFixed(2)} | ${results.map((r) => r.storedPerSec.toFixed(0)).join(', ')} |`,
    );
  }
  report.say('');
  report.say(
    'All instances, the broker, PostgreSQL and the publisher share the same 2 cores here, so more instances add coordination work without adding processors: on this machine the figures show the cost of sharing, not the gain. On separate machines each instance brings its own cores for parsing and analysis, while every instance writes to the one database.',
  );
  report.write();
}

await main();
