/**
 * Speed of the rolling analyser: evaluations per second of one (mark, tag) with 10^4 and 10^6
 * history samples, and watch updates per second across 1,000 tags, each on a real SQLite store and
 * each beside a baseline measured in the same run (the machine is shared and its speed varies):
 * a plain summing pass over the same history, and reading the same samples from the store alone.
 * Also the longest the event loop waited while the analyser worked, which is what ingest feels.
 *
 * Run after a build: npx tsx test/bench/analyser.bench.ts
 */
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { cpus, loadavg, tmpdir, totalmem } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { pino } from 'pino';
import {
  chartDesign,
  createMarkTagState,
  createWatch,
  evaluateMark,
  markAddSample,
  markSettings,
  resolveTagSettings,
  watchUpdate,
} from '@trueshift/analyser';
import { buildAnalyser } from '@trueshift/analyser-service';
import { ar1Series, seededRandom } from '@trueshift/stats';
import type { MarkRecord, SampleInput } from '@trueshift/store';
import { openSqliteStore } from '@trueshift/store-sqlite';

const MINUTE = 60_000;
const T0 = Date.UTC(2020, 0, 1);
const log = pino({ level: 'warn' });

function median(values: number[]): number {
  const sorted = [...values].sort((a, b) => a - b);
  const mid = sorted.length >> 1;
  return sorted.length % 2 === 1
    ? (sorted[mid] ?? Number.NaN)
    : ((sorted[mid - 1] ?? 0) + (sorted[mid] ?? 0)) / 2;
}

function nowMs(): number {
  return Number(process.hrtime.bigint()) / 1e6;
}

function timeMs(run: () => unknown, repeats: number): number {
  const times: number[] = [];
  let sink = 0;
  for (let r = 0; r < repeats; r++) {
    const start = nowMs();
    const result = run();
    times.push(nowMs() - start);
    sink += typeof result === 'number' ? result : 1;
  }
  if (Number.isNaN(sink)) console.log('');
  return median(times);
}

/**
 * The longest gap between the ticks of a 1 ms interval while some work runs: how long a sample
 * arriving for ingest in the same process would have waited for its turn.
 */
function loopWatch(): { stop(): number } {
  let last = nowMs();
  let longest = 0;
  const timer = setInterval(() => {
    const t = nowMs();
    longest = Math.max(longest, t - last);
    last = t;
  }, 1);
  return {
    stop() {
      clearInterval(timer);
      return Math.max(longest, nowMs() - last);
    },
  };
}

function plainPass(x: Float64Array): number {
  let sum = 0;
  for (const value of x) sum += value;
  return sum;
}

function samplesOf(tag: string, values: ArrayLike<number>, from: number): SampleInput[] {
  return Array.from(values, (value, i) => {
    const t = T0 + (from + i) * MINUTE;
    return { tag, t, value, quality: 192, source: 'bench', receivedAt: t };
  });
}

const lines: string[] = [];
const say = (line: string): void => {
  console.log(line);
  lines.push(line);
};

const dir = mkdtempSync(join(tmpdir(), 'trueshift-bench-analyser-'));
const cpu = cpus()[0]?.model ?? 'unknown CPU';
say('# Rolling analyser benchmark');
say('');
say(
  `Machine: ${cpu}, ${cpus().length} cores, ${(totalmem() / 2 ** 30).toFixed(0)} GiB, Node.js ${process.version}; ${new Date().toISOString()}.`,
);
say(
  `Load average at the start (1, 5, 15 min): ${loadavg()
    .map((x) => x.toFixed(1))
    .join(
      ', ',
    )}. The machine is shared: absolute times and event-loop waits swing with the load, the ratios to the baselines less.`,
);
say(
  'Medians of repeated runs. SQLite files in the system temp folder; the analyser with its defaults (batches of 10,000 samples, after-window cap 100, before-window 30).',
);
say('');

// ---------------------------------------------------------------------------------------------
say('## Evaluations of one (mark, tag)');
say('');
say(
  'One new sample after the mark, then one cycle: fold it in, evaluate against the cached history, store the evidence snapshot and the state. The pure evaluation is `evaluateMark` alone; the baseline is one plain summing pass over the same history.',
);
say('');
say(
  '| history N | first evaluation, history read (ms) | cycle per sample (ms) | evaluations per second | pure evaluation (ms) | baseline pass (ms) | cycle / baseline | pure / baseline |',
);
say('| ---: | ---: | ---: | ---: | ---: | ---: | ---: | ---: |');

const loopDelays: string[] = [];

for (const n of [1e4, 1e6]) {
  const random = seededRandom(7);
  const history = ar1Series(random, n, 100, 2, 0.5);
  const store = openSqliteStore({ path: join(dir, `evaluate-${n}.db`) });
  await store.upsertTag({ name: 'yield', settings: { inControlArl: 1e7, nAfterCap: 1000 } }, T0);
  for (let i = 0; i < n; i += 50_000) {
    await store.writeSamples(samplesOf('yield', history.subarray(i, i + 50_000), i));
  }
  let now = T0 + n * MINUTE;
  const analyser = buildAnalyser({ store, log, clock: () => now, options: { pollMs: 0 } });
  // Folding the history itself in is the watch's work, measured below; here it only gets it done.
  await analyser.drain();
  await store.createMark(
    { tags: ['yield'], at: T0 + n * MINUTE, label: 'bench', direction: 'rise' },
    'bench',
    now,
  );
  const after = ar1Series(random, 200, 100, 2, 0.5);
  let index = n;
  const oneSample = async (): Promise<void> => {
    now = T0 + index * MINUTE;
    await store.writeSamples(samplesOf('yield', [after[index - n] ?? 100], index));
    index += 1;
    await analyser.drain();
  };
  const firstWatch = loopWatch();
  const firstStart = nowMs();
  await oneSample();
  const first = nowMs() - firstStart;
  loopDelays.push(
    `| first evaluation of a mark (history read in pages), history ${n.toExponential(0)} | ${firstWatch.stop().toFixed(1)} |`,
  );
  const watch = loopWatch();
  const cycles: number[] = [];
  const repeats = n >= 1e6 ? 30 : 150;
  for (let r = 0; r < repeats; r++) {
    const start = nowMs();
    await oneSample();
    cycles.push(nowMs() - start);
  }
  loopDelays.push(
    `| later evaluations of a mark, history ${n.toExponential(0)} | ${watch.stop().toFixed(1)} |`,
  );
  const cycle = median(cycles);

  const mark: MarkRecord = {
    id: 'bench',
    tags: ['yield'],
    at: T0,
    label: '',
    note: '',
    direction: 'rise',
    smallestShift: null,
    nBefore: null,
    nAfterCap: 1000,
    riskLevel: null,
    settlingMs: null,
    createdAt: 0,
    updatedAt: 0,
    withdrawnAt: null,
    revision: 1,
  };
  const settings = markSettings(mark, resolveTagSettings({}));
  const state = createMarkTagState(mark, 'yield', settings);
  for (let i = 0; i < 30; i++) markAddSample(state, settings, T0 + i, after[i] ?? 100);
  for (let i = 0; i < 3; i++) evaluateMark(state, history, settings);
  const pure = timeMs(() => evaluateMark(state, history, settings).nAfter, n >= 1e6 ? 15 : 100);
  const baseline = timeMs(() => plainPass(history), n >= 1e6 ? 15 : 100);
  say(
    `| ${n.toExponential(0)} | ${first.toFixed(1)} | ${cycle.toFixed(2)} | ${(1000 / cycle).toFixed(0)} | ${pure.toFixed(2)} | ${baseline.toFixed(3)} | ${(cycle / baseline).toFixed(1)} | ${(pure / baseline).toFixed(1)} |`,
  );
  await analyser.close();
  await store.close();
}

// ---------------------------------------------------------------------------------------------
say('');
say('## Watch updates across 1,000 tags');
say('');
say(
  'Samples of 1,000 batch tags interleaved (one sample of every tag, then the next round), already in the store; one drain folds them all in: CUSUM, EWMA and the data-quality watch per sample, the state of every touched tag saved each cycle. The tags were created and their watches started beforehand from 40 values each. Baselines: reading the same samples from the store alone (`samplesAfter` in the same batches), and the pure watch updates alone over the same values.',
);
say('');
say(
  '| watches | samples | drain (ms) | watch updates per second | store read alone (ms) | pure watch updates (ms) | drain / store read | drain / pure |',
);
say('| --- | ---: | ---: | ---: | ---: | ---: | ---: | ---: |');

async function watchRun(label: string, baselineSize: number, repeats: number): Promise<void> {
  const tags = 1000;
  const rounds = 100;
  const store = openSqliteStore({ path: join(dir, `watch-${baselineSize}.db`) });
  const random = seededRandom(11);
  const names = Array.from({ length: tags }, (_, i) => `unit${String(i).padStart(4, '0')}.flow`);
  const length = 40 + rounds * repeats;
  const series = names.map(() => ar1Series(random, length, 50, 1, 0.3));
  const round = (r: number): SampleInput[] =>
    names.map((tag, i) => {
      const t = T0 + r * MINUTE;
      return {
        tag,
        t,
        value: series[i]?.[r] ?? 50,
        quality: 192,
        source: 'bench',
        receivedAt: t,
      };
    });
  for (let r = 0; r < 40; r++) await store.writeSamples(round(r));
  let now = T0 + 40 * MINUTE;
  const analyser = buildAnalyser({
    store,
    log,
    clock: () => now,
    options: { pollMs: 0, defaults: { baselineSize } },
  });
  await analyser.drain();

  const drains: number[] = [];
  const reads: number[] = [];
  let longestWait = 0;
  let total = 0;
  for (let rep = 0; rep < repeats; rep++) {
    const from = 40 + rep * rounds;
    const before = await store.lastSeq();
    for (let r = from; r < from + rounds; r++) await store.writeSamples(round(r));
    now = T0 + (from + rounds) * MINUTE;
    total = (await store.lastSeq()) - before;
    const watch = loopWatch();
    const start = nowMs();
    const report = await analyser.drain();
    drains.push(nowMs() - start);
    longestWait = Math.max(longestWait, watch.stop());
    if (report.samples !== total) throw new Error(`drained ${report.samples}, expected ${total}`);
    const t0 = nowMs();
    let seq = before;
    for (;;) {
      const batch = await store.samplesAfter(seq, 10_000);
      const last = batch[batch.length - 1];
      if (last === undefined) break;
      seq = last.seq;
    }
    reads.push(nowMs() - t0);
  }
  const drain = median(drains);
  const read = median(reads);
  loopDelays.push(
    `| folding ${total} samples of 1,000 tags, ${label} | ${longestWait.toFixed(1)} |`,
  );

  const design = chartDesign({ k: 0.5, lambda: 0.2, targetArl: 500 });
  const watchSettings = {
    k: design.k,
    h: design.h,
    lambda: design.lambda,
    L: design.L,
    minHistory: 30,
    baselineSize,
  };
  const pure = timeMs(() => {
    const watches = series.map((x) => createWatch(watchSettings, x.subarray(0, 40)));
    let signals = 0;
    for (let r = 40; r < 40 + rounds; r++) {
      for (let i = 0; i < tags; i++) {
        const w = watches[i];
        if (w !== undefined && watchUpdate(w, r, series[i]?.[r] ?? 50) !== null) signals += 1;
      }
    }
    return signals;
  }, 5);
  say(
    `| ${label} | ${total} | ${drain.toFixed(0)} | ${((total / drain) * 1000).toExponential(2)} | ${read.toFixed(0)} | ${pure.toFixed(1)} | ${(drain / read).toFixed(1)} | ${(drain / pure).toFixed(0)} |`,
  );
  await analyser.close();
  await store.close();
}

// Steady state: the 40 values before are the whole baseline (baselineSize 40), as for a tag whose
// baseline is long settled. Learning: the default baselineSize of 200, so every tag still carries
// its provisional baseline's values in its saved state, the heaviest the state gets.
await watchRun('steady (baseline set), median of 3', 40, 3);
// One run only: a second 100 rounds would take the tags past baselineSize, out of learning.
await watchRun('learning (provisional baseline)', 200, 1);

say('');
say('## Longest event-loop wait while the analyser works');
say('');
say(
  'What ingest, sharing the process, would feel (the longest gap between the ticks of a 1 ms interval): the analyser yields between batches, between folding a batch and saving its state, after each evaluation and between pages of a history read, so a wait is one of those steps at most. One evaluation of a 10^6 history is one synchronous `computeEvidence`.',
);
say('');
say('| work | longest wait (ms) |');
say('| --- | ---: |');
for (const line of loopDelays) say(line);

rmSync(dir, { recursive: true, force: true });
const out = fileURLToPath(new URL('./results/analyser.md', import.meta.url));
writeFileSync(out, `${lines.join('\n')}\n`);
console.log(`\nWritten to ${out}`);
