import { computeEvidence, seededRandom, windowDifferences } from '@trueshift/stats';
import type { Direction } from '@trueshift/stats';
import { describe, expect, it } from 'vitest';
import { buildFigures, MAX_DOTS, referenceFigure } from './figures.js';
import type { FigureInput } from './figures.js';

const HOUR = 3_600_000;
const MARK_AT = Date.UTC(2026, 4, 10, 6);

function plant(options: {
  nHistory: number;
  nAfter: number;
  shift: number;
  direction: Direction;
  seed?: number;
}): {
  input: FigureInput;
  differences: Float64Array;
  evidence: ReturnType<typeof computeEvidence>;
} {
  const rng = seededRandom(options.seed ?? 7);
  const history = Float64Array.from({ length: options.nHistory }, () => 10 + 0.2 * rng.normal());
  const after = Float64Array.from(
    { length: options.nAfter },
    () => 10 + options.shift + 0.2 * rng.normal(),
  );
  const evidence = computeEvidence({
    history,
    after,
    direction: options.direction,
    riskLevel: 0.05,
    nBefore: 20,
  });
  // As the store gives it back: the analyser's wrapper, through JSON (NaN becomes null).
  const body: unknown = JSON.parse(JSON.stringify({ basis: 'batch', evidence }));
  const t0 = MARK_AT - options.nHistory * HOUR;
  const runT = [
    ...Array.from(history, (_, i) => t0 + i * HOUR),
    ...Array.from(after, (_, i) => MARK_AT + i * HOUR),
  ];
  const input: FigureInput = {
    tag: { name: 'reactor/yield', unit: '%', description: 'Reactor yield' },
    mark: { id: 'm1', at: MARK_AT, label: 'New catalyst', note: '', direction: options.direction },
    basis: 'batch',
    snapshot: {
      sampleTime: MARK_AT + (options.nAfter - 1) * HOUR,
      evaluatedAt: MARK_AT + options.nAfter * HOUR,
      nAfter: options.nAfter,
      risk: evidence.reference.status === 'ok' ? evidence.reference.risk : null,
      verdict: evidence.verdict,
      body,
    },
    run: { t: runT, value: [...history, ...after], total: runT.length, thinned: false },
    history,
    beforeStart: t0 + (options.nHistory - 20) * HOUR,
    after: { t: Array.from(after, (_, i) => MARK_AT + i * HOUR), value: after },
    path: [
      { evaluatedAt: 3, sampleTime: 3, nAfter: 3, risk: 0.2, verdict: 'still-gathering' },
      { evaluatedAt: 1, sampleTime: 1, nAfter: 2, risk: 0.4, verdict: 'still-gathering' },
      // A window size judged again later (after a restart) keeps its latest risk.
      { evaluatedAt: 4, sampleTime: 3, nAfter: 3, risk: 0.25, verdict: 'still-gathering' },
    ],
    smallestShift: null,
  };
  return { input, differences: windowDifferences(history, 20, options.nAfter), evidence };
}

describe('buildFigures', () => {
  it('draws one dot per historical difference and marks exactly those the risk counted', () => {
    const { input, differences, evidence } = plant({
      nHistory: 300,
      nAfter: 8,
      shift: -0.15,
      direction: 'fall',
    });
    const f = buildFigures(input, differences);
    const dots = f.reference;
    if (dots?.kind !== 'dots' || evidence.reference.status !== 'ok') {
      throw new Error('expected a dot plot and a risk');
    }
    expect(dots.x).toHaveLength(evidence.reference.m);
    expect(f.window.m).toBe(evidence.reference.m);
    expect(dots.beyond).toBe(evidence.reference.countAtLeast);
    expect(dots.isBeyond.filter(Boolean)).toHaveLength(evidence.reference.countAtLeast);
    // Sorted by x, and each column stacks 1, 2, 3, … without gaps.
    const heights = new Map<number, number>();
    dots.x.forEach((x, i) => {
      expect(x).toBeGreaterThanOrEqual(dots.x[i - 1] ?? x);
      const height = (heights.get(x) ?? 0) + 1;
      heights.set(x, height);
      expect(dots.stack[i]).toBe(height);
    });
  });

  it('replays CUSUM and EWMA to the very sums the evidence ended with', () => {
    const { input, differences, evidence } = plant({
      nHistory: 200,
      nAfter: 15,
      shift: 0.3,
      direction: 'rise',
    });
    const f = buildFigures(input, differences);
    expect(f.cusum?.upper.at(-1)).toBeCloseTo(evidence.cusum.upper, 12);
    expect(f.cusum?.lower.at(-1)).toBeCloseTo(evidence.cusum.lower, 12);
    expect(f.cusum?.signalAt).toBe(evidence.cusum.signalAt);
    expect(f.cusum?.h).toBe(evidence.cusum.h);
    expect(f.ewma?.z.at(-1)).toBeCloseTo(evidence.ewma.z, 12);
    expect(f.ewma?.upper.at(-1)).toBeCloseTo(evidence.ewma.upper, 12);
    expect(f.ewma?.n).toHaveLength(15);
  });

  it('compares the before-window and the after-window value by value, with their means', () => {
    const { input, differences, evidence } = plant({
      nHistory: 120,
      nAfter: 6,
      shift: 0.1,
      direction: 'either',
    });
    const f = buildFigures(input, differences);
    expect(f.comparison.before).toEqual(Array.from(input.history).slice(-20));
    expect(f.comparison.after).toEqual(Array.from(input.after.value));
    expect(f.comparison.beforeMean).toBeCloseTo(evidence.before.mean, 12);
    expect(f.comparison.afterMean).toBeCloseTo(evidence.after.mean, 12);
    expect(f.run.before).toEqual({
      from: input.beforeStart,
      to: MARK_AT,
      mean: evidence.before.mean,
    });
    expect(f.path.nAfter).toEqual([2, 3]);
    expect(f.path.risk).toEqual([0.4, 0.25]);
  });

  it('states the verdict, the question and every row of the summary in words', () => {
    const { input, differences, evidence } = plant({
      nHistory: 300,
      nAfter: 12,
      shift: -0.4,
      direction: 'fall',
    });
    const f = buildFigures(input, differences);
    expect(f.verdict).toBe(evidence.verdict);
    expect(f.verdictTitle).toBe('Credible fall');
    expect(f.question).toBe(
      'Did reactor/yield fall after “New catalyst” (2026-05-10 06:00 UTC), and how sure can we be?',
    );
    const labels = f.table.map((r) => r.label);
    expect(labels).toEqual([
      'Verdict',
      'Before the change',
      'After the change',
      'Observed shift',
      'Confidence interval of the shift (95%)',
      'Reference risk',
      "Welch's t test",
      'Autocorrelation',
      'CUSUM',
      'EWMA',
      'Baseline',
      'Samples still needed',
    ]);
    const row = (label: string): string => f.table.find((r) => r.label === label)?.value ?? '';
    expect(row('Before the change')).toMatch(/^n_A = 20, mean 10(\.\d+)? %/);
    expect(row('Observed shift')).toMatch(/^−0\.\d+ %$/);
    expect(row("Welch's t test")).toMatch(/one-sided for a fall/);
    expect(row('Autocorrelation')).toMatch(/^No warning/);
  });

  it('says so plainly when the history was too short to judge', () => {
    const { input, differences } = plant({ nHistory: 50, nAfter: 4, shift: 0, direction: 'rise' });
    const f = buildFigures(
      { ...input, snapshot: { ...input.snapshot, body: { evidence: null } } },
      differences,
    );
    expect(f.verdict).toBe('not-enough-history');
    expect(f.evidence).toBeNull();
    expect(f.cusum).toBeNull();
    expect(f.ewma).toBeNull();
    expect(f.reference).toBeNull();
    expect(f.table.map((r) => r.value)).toContain('none yet: the history is too short to judge');
  });
});

describe('referenceFigure', () => {
  it('bins a large reference set, every difference counted once', () => {
    const rng = seededRandom(3);
    const differences = Float64Array.from({ length: MAX_DOTS + 500 }, () => rng.normal());
    const ref = referenceFigure(differences, 1.5, 'rise', 0.05);
    if (ref.kind !== 'bins') throw new Error('expected bins');
    expect(ref.counts.reduce((a, b) => a + b, 0)).toBe(MAX_DOTS + 500);
    expect(ref.beyond).toBe(Array.from(differences).filter((d) => d >= 1.5).length);
  });

  it('counts ties with the observed difference as beyond it, in either direction', () => {
    const ref = referenceFigure([-2, -1, 0, 1, 2], -1, 'either', 0.05);
    expect(ref.beyond).toBe(4);
    const fall = referenceFigure([-2, -1, 0, 1, 2], -1, 'fall', 0.05);
    expect(fall.beyond).toBe(2);
  });
});
