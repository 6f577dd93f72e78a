/**
 * Speed of the statistics core: the whole evidence of one tag for history lengths 10^3 to 10^6, and
 * CUSUM / EWMA updates per second. Each figure is the median of several runs and is set against a
 * baseline measured in the same run (one plain pass summing the same array), because this machine is
 * shared and its absolute speed varies from run to run.
 */
import { writeFileSync } from 'node:fs';
import { cpus, totalmem } from 'node:os';
import { fileURLToPath } from 'node:url';
import {
  ar1Series,
  computeEvidence,
  createCusum,
  createEwma,
  cusumUpdate,
  ewmaUpdate,
  seededRandom,
} from '@trueshift/stats';

function median(values: number[]): number {
  const sorted = [...values].sort((a, b) => a - b);
  const mid = sorted.length >> 1;
  return sorted.length % 2 === 1
    ? (sorted[mid] ?? Number.NaN)
    : ((sorted[mid - 1] ?? 0) + (sorted[mid] ?? 0)) / 2;
}

function timeMs(run: () => unknown, repeats: number): number {
  const times: number[] = [];
  let sink = 0;
  for (let r = 0; r < repeats; r++) {
    const start = process.hrtime.bigint();
    const result = run();
    times.push(Number(process.hrtime.bigint() - start) / 1e6);
    sink += typeof result === 'number' ? result : 1;
  }
  if (Number.isNaN(sink)) console.log('');
  return median(times);
}

function plainPass(x: Float64Array): number {
  let sum = 0;
  for (const value of x) sum += value;
  return sum;
}

const lines: string[] = [];
const say = (line: string): void => {
  console.log(line);
  lines.push(line);
};

const cpu = cpus()[0]?.model ?? 'unknown CPU';
say(`# Statistics core benchmark`);
say('');
say(
  `Machine: ${cpu}, ${cpus().length} cores, ${(totalmem() / 2 ** 30).toFixed(0)} GiB, Node.js ${process.version}; ${new Date().toISOString()}.`,
);
say('Medians of repeated runs; the baseline is one plain summing pass over the same history.');
say('');
say('## Full evidence of one tag (after-window 30, before-window 30)');
say('');
say('| history N | evidence (ms) | baseline pass (ms) | ratio to baseline | ns per sample |');
say('| ---: | ---: | ---: | ---: | ---: |');

const random = seededRandom(99);
for (const n of [1e3, 1e4, 1e5, 1e6]) {
  const history = ar1Series(random, n, 100, 2, 0.5);
  const after = ar1Series(random, 30, 101, 2, 0.5);
  const repeats = n >= 1e6 ? 15 : n >= 1e5 ? 30 : 200;
  // Warm up so the optimising compiler has seen the code before it is timed.
  for (let i = 0; i < 3; i++)
    computeEvidence({ history, after, direction: 'rise', riskLevel: 0.05, nBefore: 30 });
  const evidence = timeMs(
    () =>
      computeEvidence({ history, after, direction: 'rise', riskLevel: 0.05, nBefore: 30 })
        .observedShift,
    repeats,
  );
  const baseline = timeMs(() => plainPass(history), repeats);
  say(
    `| ${n.toExponential(0)} | ${evidence.toFixed(3)} | ${baseline.toFixed(3)} | ${(evidence / baseline).toFixed(1)} | ${((evidence * 1e6) / n).toFixed(1)} |`,
  );
}

say('');
say('## CUSUM and EWMA updates');
say('');
say('| chart | updates per second | ratio to plain pass |');
say('| --- | ---: | ---: |');
const stream = ar1Series(random, 1e6, 0, 1, 0.3);
const passMs = timeMs(() => plainPass(stream), 21);
const cusumMs = timeMs(() => {
  const state = createCusum({ target: 0, sigma: 1, k: 0.5, h: 5 });
  for (const x of stream) cusumUpdate(state, x);
  return state.upper;
}, 21);
const ewmaMs = timeMs(() => {
  const state = createEwma({ target: 0, sigma: 1, lambda: 0.2, L: 2.962 });
  for (const x of stream) ewmaUpdate(state, x);
  return state.z;
}, 21);
for (const [name, ms] of [
  ['CUSUM (upper and lower)', cusumMs],
  ['EWMA (time-varying limits)', ewmaMs],
] as const) {
  say(
    `| ${name} | ${((stream.length / ms) * 1000).toExponential(2)} | ${(ms / passMs).toFixed(1)} |`,
  );
}

const out = fileURLToPath(new URL('./results/stats.md', import.meta.url));
writeFileSync(out, `${lines.join('\n')}\n`);
console.log(`\nWritten to ${out}`);
