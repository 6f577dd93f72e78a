/**
 * Resident memory of the rolling analyser (services/analyser `buildAnalyser` over a real SQLite
 * store file) with 10,000 and 100,000 tags watched, every watch live (past its baseline), and the
 * bytes it costs per tag.
 *
 * Each measurement is a child process of its own run with --expose-gc, so a forced collection
 * comes before every reading and no run inherits another's heap: it opens a copy of a store file
 * that already holds every tag's samples, builds the analyser, reads RSS and the V8 heap ("before
 * any tag"), drains the store (the analyser takes in every tag and sample) and reads them again.
 * Bytes per tag = (after − before) / N. The baseline, run the same way on the same file in the same
 * run: a child that reads the same samples through the store in the analyser's batches and keeps
 * nothing, so what SQLite's page cache and the reading itself leave in RSS is seen apart from what
 * the watches keep.
 *
 * Run with `npm run build && npx tsx test/bench/memory.bench.ts`.
 */
import { spawnSync } from 'node:child_process';
import { copyFileSync, mkdtempSync, rmSync, statSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { pino } from 'pino';
import { buildAnalyser } from '@trueshift/analyser-service';
import { ar1Series, seededRandom } from '@trueshift/stats';
import type { SampleInput } from '@trueshift/store';
import { openSqliteStore } from '@trueshift/store-sqlite';
import { benchReport, machineLine, median, MIB } from './bench-kit.js';

const TAG_COUNTS = (process.env.BENCH_MEMORY_TAGS ?? '10000,100000').split(',').map(Number);
const RUNS = Number(process.env.BENCH_MEMORY_RUNS ?? 3);
/**
 * baselineSize = minHistory = 30 (the default minHistory): a watch sets its final baseline at its
 * 30th value and keeps no learning values after it, the steady state a tag reaches after 200
 * values with the default baselineSize, at a sixth of the samples to write and fold in.
 */
const BASELINE_SIZE = 30;
const SAMPLES_PER_TAG = 32;
const MINUTE = 60_000;
const T0 = Date.UTC(2026, 0, 1);
const BATCH = 10_000;
const WRITE_BATCH = 50_000;

interface Reading {
  rss: number;
  heapUsed: number;
  /** What V8 holds for its heap, live objects or not: part of RSS a collection need not return. */
  heapTotal: number;
}

interface ChildResult {
  before: Reading;
  after: Reading;
  seconds: number;
  samples: number;
  live: number;
}

function reading(): Reading {
  const gc = (globalThis as { gc?: () => void }).gc;
  if (gc === undefined) throw new Error('run the child with --expose-gc');
  // Twice: the first pass can leave weakly held and finalised objects for the second.
  gc();
  gc();
  const usage = process.memoryUsage();
  return { rss: usage.rss, heapUsed: usage.heapUsed, heapTotal: usage.heapTotal };
}

function tagName(i: number): string {
  return `unit${String(i).padStart(6, '0')}.flow`;
}

/** The child's side: one measurement on one store file, the result as JSON on stdout. */
async function child(mode: 'analyser' | 'read', path: string, tags: number): Promise<void> {
  const store = openSqliteStore({ path });
  const now = T0 + SAMPLES_PER_TAG * MINUTE;
  const analyser =
    mode === 'analyser'
      ? buildAnalyser({
          store,
          log: pino({ level: 'warn' }),
          clock: () => now,
          options: { pollMs: 0, batchSize: BATCH, defaults: { baselineSize: BASELINE_SIZE } },
        })
      : null;
  const before = reading();
  const start = performance.now();
  let samples = 0;
  if (analyser === null) {
    let seq = 0;
    for (;;) {
      const batch = await store.samplesAfter(seq, BATCH);
      samples += batch.length;
      const last = batch[batch.length - 1];
      if (last === undefined) break;
      seq = last.seq;
    }
  } else {
    samples = (await analyser.drain()).samples;
  }
  const seconds = (performance.now() - start) / 1000;
  let live = 0;
  if (analyser !== null) {
    for (let i = 0; i < tags; i++) {
      const watch = analyser.watchState(tagName(i));
      if (watch !== null && watch.baseline !== null && watch.learning.length === 0) live++;
    }
  }
  const after = reading();
  await analyser?.close();
  await store.close();
  const result: ChildResult = { before, after, seconds, samples, live };
  process.stdout.write(`${JSON.stringify(result)}\n`);
}

function runChild(mode: 'analyser' | 'read', path: string, tags: number): ChildResult {
  const out = spawnSync(
    process.execPath,
    [
      '--expose-gc',
      '--import',
      'tsx',
      fileURLToPath(import.meta.url),
      'child',
      mode,
      path,
      String(tags),
    ],
    { encoding: 'utf8', maxBuffer: 1 << 24 },
  );
  if (out.status !== 0)
    throw new Error(`${mode} child failed (${String(out.status)}):\n${out.stderr}`);
  const last = out.stdout.trim().split('\n').pop() ?? '';
  return JSON.parse(last) as ChildResult;
}

/** A store file holding `tags` tags of SAMPLES_PER_TAG values each, written tag by tag. */
async function storeFile(dir: string, tags: number): Promise<string> {
  const path = join(dir, `base-${String(tags)}.db`);
  const store = openSqliteStore({ path });
  const random = seededRandom(tags);
  let batch: SampleInput[] = [];
  for (let i = 0; i < tags; i++) {
    const tag = tagName(i);
    const values = ar1Series(random, SAMPLES_PER_TAG, 50, 1, 0.3);
    for (let j = 0; j < SAMPLES_PER_TAG; j++) {
      const t = T0 + j * MINUTE;
      batch.push({ tag, t, value: values[j] ?? 50, quality: 192, source: 'bench', receivedAt: t });
    }
    if (batch.length >= WRITE_BATCH) {
      await store.writeSamples(batch);
      batch = [];
    }
  }
  if (batch.length > 0) await store.writeSamples(batch);
  // Closing checkpoints the WAL into the file, so a plain copy is the whole store.
  await store.close();
  return path;
}

async function main(): Promise<void> {
  const report = benchReport('memory');
  const { say } = report;
  const dir = mkdtempSync(join(tmpdir(), 'trueshift-bench-memory-'));
  try {
    say('# Memory of the rolling analyser');
    say('');
    say(machineLine());
    say('');
    say(
      `Each figure is the median of ${String(RUNS)} runs, each run a child process of its own (node --expose-gc), readings taken after two forced collections. The store file holds every tag's ${String(SAMPLES_PER_TAG)} samples (batch tags, AR(1) values) before the child starts; "before" is the child with the store open and the analyser built, "after" is once one drain has taken in every tag and sample. Analyser defaults but baselineSize ${String(BASELINE_SIZE)}, so every watch is live (its final baseline set, no learning values kept), as a tag's is after 200 values with the default baselineSize; batches of ${String(BATCH)} samples. Baseline: a child that reads the same samples through \`store.samplesAfter\` in the same batches and keeps nothing (what SQLite's page cache, up to 64 MiB per connection, and the reading leave in RSS).`,
    );
    say('');
    say(
      '| tags watched | samples | live watches | RSS before (MiB) | RSS after (MiB) | **RSS bytes per tag** | V8 heap used before → after (MiB) | V8 heap reserved after (MiB) | heap bytes per tag | drain (s) | baseline: read alone, RSS bytes per tag | analyser − read alone, RSS bytes per tag | RSS per tag / read alone |',
    );
    say(
      '| ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |',
    );
    const perRun: string[] = [];
    for (const tags of TAG_COUNTS) {
      const built = performance.now();
      const base = await storeFile(dir, tags);
      const buildSeconds = (performance.now() - built) / 1000;
      const fileMiB = statSync(base).size / MIB;
      const analysed: ChildResult[] = [];
      const read: ChildResult[] = [];
      for (let run = 0; run < RUNS; run++) {
        const copy = join(dir, `run-${String(tags)}-${String(run)}.db`);
        // The analyser saves its state into the file, so each run starts from a fresh copy.
        copyFileSync(base, copy);
        const a = runChild('analyser', copy, tags);
        const r = runChild('read', copy, tags);
        rmSync(copy, { force: true });
        rmSync(`${copy}-wal`, { force: true });
        rmSync(`${copy}-shm`, { force: true });
        if (a.live !== tags) throw new Error(`${String(a.live)} of ${String(tags)} watches live`);
        if (a.samples !== tags * SAMPLES_PER_TAG || r.samples !== a.samples) {
          throw new Error(`drained ${String(a.samples)}, read ${String(r.samples)} samples`);
        }
        analysed.push(a);
        read.push(r);
        perRun.push(
          `| ${tags.toLocaleString('en')} | ${String(run + 1)} | ${((a.after.rss - a.before.rss) / tags).toFixed(0)} | ${((a.after.heapUsed - a.before.heapUsed) / tags).toFixed(0)} | ${((r.after.rss - r.before.rss) / tags).toFixed(0)} | ${a.seconds.toFixed(1)} |`,
        );
        console.log(`  ${perRun[perRun.length - 1] ?? ''}`);
      }
      const m = (pick: (c: ChildResult) => number, of: ChildResult[] = analysed): number =>
        median(of.map(pick));
      const rssPerTag = m((c) => (c.after.rss - c.before.rss) / tags);
      const readPerTag = m((c) => (c.after.rss - c.before.rss) / tags, read);
      say(
        `| ${tags.toLocaleString('en')} | ${(tags * SAMPLES_PER_TAG).toLocaleString('en')} | ${m((c) => c.live).toLocaleString('en')} | ${(m((c) => c.before.rss) / MIB).toFixed(1)} | ${(m((c) => c.after.rss) / MIB).toFixed(1)} | **${rssPerTag.toFixed(0)}** | ${(m((c) => c.before.heapUsed) / MIB).toFixed(1)} → ${(m((c) => c.after.heapUsed) / MIB).toFixed(1)} | ${(m((c) => c.after.heapTotal) / MIB).toFixed(1)} | ${m((c) => (c.after.heapUsed - c.before.heapUsed) / tags).toFixed(0)} | ${m((c) => c.seconds).toFixed(1)} | ${readPerTag.toFixed(0)} | ${(rssPerTag - readPerTag).toFixed(0)} | ${(rssPerTag / readPerTag).toFixed(1)} |`,
      );
      console.log(
        `  (store file ${fileMiB.toFixed(0)} MiB, written in ${buildSeconds.toFixed(1)} s)`,
      );
    }
    say('');
    say(
      "Bytes per tag are (after − before) / N of the same child, medians over the runs. RSS counts whatever the process holds (freed memory the allocator has not given back included); the V8 heap after a forced collection is the live JavaScript state alone: each tag's record, settings and watch state (CUSUM, EWMA, baseline, data-quality watch).",
    );
    say('');
    say('Every run:');
    say('');
    say(
      '| tags | run | RSS bytes per tag | heap bytes per tag | read alone, RSS bytes per tag | drain (s) |',
    );
    say('| ---: | ---: | ---: | ---: | ---: | ---: |');
    for (const line of perRun) say(line);
    report.write();
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

const [, , role, mode, path, tags] = process.argv;
if (role === 'child') {
  if ((mode !== 'analyser' && mode !== 'read') || path === undefined) {
    throw new Error(`usage: memory.bench.ts child analyser|read <store file> <tags>`);
  }
  await child(mode, path, Number(tags));
} else {
  await main();
}
