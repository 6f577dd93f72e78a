import { readFileSync } from 'node:fs';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import {
  dotPlotData,
  minimumReferenceSize,
  observedDifference,
  referenceRisk,
  windowDifferences,
} from './reference-distribution.js';

/** Box, Hunter & Hunter, Statistics for Experimenters, 2nd ed., §3.1, Table 3.2 (see README.md). */
function bhhYields(): number[] {
  const url = new URL(
    '../../../test/fixtures/reference/bhh-table-3.2-batch-yields.csv',
    import.meta.url,
  );
  const lines = readFileSync(url, 'utf8').trim().split(/\r?\n/);
  expect(lines[0]).toBe('batch,yield');
  return lines.slice(1).map((line) => Number(line.split(',')[1]));
}

/** The definition, one window at a time, with plain summation. */
function naiveDifferences(x: ArrayLike<number>, nBefore: number, nAfter: number): number[] {
  const out: number[] = [];
  for (let j = 0; j + nBefore + nAfter <= x.length; j++) out.push(naiveAt(x, j, nBefore, nAfter));
  return out;
}

function naiveAt(x: ArrayLike<number>, j: number, nBefore: number, nAfter: number): number {
  let before = 0;
  for (let i = j; i < j + nBefore; i++) before += x[i] ?? Number.NaN;
  let after = 0;
  for (let i = j + nBefore; i < j + nBefore + nAfter; i++) after += x[i] ?? Number.NaN;
  return after / nAfter - before / nBefore;
}

/** mulberry32 + Box–Muller, so the large-array checks are reproducible. */
function normals(seed: number, n: number, level: number): Float64Array {
  let state = seed >>> 0;
  const uniform = (): number => {
    state = (state + 0x6d2b79f5) >>> 0;
    let t = state;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    out[i] = level + Math.sqrt(-2 * Math.log(1 - uniform())) * Math.cos(2 * Math.PI * uniform());
  }
  return out;
}

describe('reference distribution on Box, Hunter & Hunter Table 3.2', () => {
  const yields = bhhYields();
  const differences = windowDifferences(yields, 10, 10);

  it('gives 191 differences, 9 of them at or above 1.30: risk 9/191 = 0.047', () => {
    expect(yields).toHaveLength(210);
    // Box, Hunter & Hunter, Statistics for Experimenters, 2nd ed., §3.1 (Table 3.3 and its
    // figure): 210 - 20 + 1 = 191 reference differences, 9 at or above the observed 1.30,
    // risk 9/191 = 0.047.
    expect(differences).toHaveLength(191);
    const result = referenceRisk(differences, 1.3, { direction: 'rise', riskLevel: 0.05 });
    expect(result.status).toBe('ok');
    if (result.status !== 'ok') return;
    expect(result.m).toBe(191);
    expect(result.countAtLeast).toBe(9);
    expect(result.risk).toBe(9 / 191);
    expect(result.risk).toBeCloseTo(0.047, 3);
    expect(result.riskRise).toBe(result.risk);
    expect(result.credible).toBe(true);
    expect(result.minimumM).toBe(20);
  });

  it('agrees with exact decimal arithmetic on every window', () => {
    // Yields have one decimal, so 10 × yield is an integer and each difference is exactly
    // (sum after - sum before) / 100 in those integers: an independent, rounding-free count.
    const tenths = yields.map((y) => Math.round(y * 10));
    const exact = naiveDifferences(tenths, 10, 10).map((d) => Math.round(d * 10)); // in 0.01
    expect(exact.filter((d) => d >= 130)).toHaveLength(9);
    for (let j = 0; j < 191; j++) {
      expect(differences[j]).toBeCloseTo((exact[j] ?? Number.NaN) / 100, 12);
    }
  });

  it('needs the tie tolerance when the observed value equals differences in decimal', () => {
    // At the book's 1.30 the tolerance changes nothing: no difference lies near 1.30 (the nearest
    // are 1.25 and 1.33), so exact floating-point comparison also counts 9.
    expect(differences.filter((d) => Math.abs(d - 1.3) < 1e-6)).toHaveLength(0);
    expect(differences.filter((d) => d >= 1.3)).toHaveLength(9);
    // Two windows differ by exactly 1.33 in decimal (exact integer arithmetic above); in binary
    // one of them comes out just below 1.33. Exact comparison drops it, the tolerance keeps it.
    const tenths = yields.map((y) => Math.round(y * 10));
    const exact = naiveDifferences(tenths, 10, 10).map((d) => Math.round(d * 10));
    expect(exact.filter((d) => d === 133)).toHaveLength(2);
    expect(exact.filter((d) => d >= 133)).toHaveLength(9);
    expect(differences.filter((d) => d >= 1.33)).toHaveLength(8);
    const withTolerance = referenceRisk(differences, 1.33, { direction: 'rise', riskLevel: 0.05 });
    expect(withTolerance.status === 'ok' && withTolerance.countAtLeast).toBe(9);
    const exactCompare = referenceRisk(differences, 1.33, {
      direction: 'rise',
      riskLevel: 0.05,
      tolerance: 0,
    });
    expect(exactCompare.status === 'ok' && exactCompare.countAtLeast).toBe(8);
  });

  it('matches observedDifference for a window taken out of the same history', () => {
    const j = 57;
    const before = yields.slice(0, j + 10);
    const after = yields.slice(j + 10, j + 20);
    expect(observedDifference(before, after, 10)).toBeCloseTo(differences[j] ?? Number.NaN, 12);
  });
});

describe('windowDifferences', () => {
  it('equals the per-window definition on random arrays and window sizes', () => {
    fc.assert(
      fc.property(
        fc.array(fc.double({ min: -1e3, max: 1e3, noNaN: true }), { maxLength: 60 }),
        fc.integer({ min: 1, max: 12 }),
        fc.integer({ min: 1, max: 12 }),
        (x, nBefore, nAfter) => {
          const fast = windowDifferences(x, nBefore, nAfter);
          const naive = naiveDifferences(x, nBefore, nAfter);
          // M = N - nBefore - nAfter + 1, or none.
          expect(fast).toHaveLength(Math.max(0, x.length - nBefore - nAfter + 1));
          for (let j = 0; j < naive.length; j++) {
            expect(Math.abs((fast[j] ?? Number.NaN) - (naive[j] ?? Number.NaN))).toBeLessThan(1e-9);
          }
        },
      ),
      { numRuns: 300 },
    );
  });

  it('keeps precision on 10^6 samples of value ~1e4', () => {
    const n = 1_000_000;
    const x = normals(7, n, 1e4);
    const fast = windowDifferences(x, 10, 10);
    expect(fast).toHaveLength(n - 19);
    // Each naive window mean of 10 values ~1e4 is good to ~1e-11. A plain, uncentred prefix sum
    // reaches 1e10 and gives differences off by up to 1.0e-6 on this same series (measured during
    // development), so this bound tells the two apart.
    let worst = 0;
    for (let j = 0; j < fast.length; j++) {
      worst = Math.max(worst, Math.abs((fast[j] ?? Number.NaN) - naiveAt(x, j, 10, 10)));
    }
    expect(worst).toBeLessThan(1e-10);
  });

  it('keeps precision on a strongly drifting tag with long windows', () => {
    const n = 1_000_000;
    const x = normals(8, n, 0);
    for (let i = 0; i < n; i++) x[i] = (x[i] ?? 0) + 1e4 + (2e4 * i) / n; // 1e4 -> 3e4
    const fast = windowDifferences(x, 500, 700);
    let worst = 0;
    for (let j = 0; j < fast.length; j += 997) {
      worst = Math.max(worst, Math.abs((fast[j] ?? Number.NaN) - naiveAt(x, j, 500, 700)));
    }
    expect(worst).toBeLessThan(1e-9);
  });

  it('is empty when M <= 0', () => {
    expect(windowDifferences([1, 2, 3], 2, 2)).toHaveLength(0);
    expect(windowDifferences([], 1, 1)).toHaveLength(0);
    expect(Array.from(windowDifferences([1, 2, 3, 4], 2, 2))).toEqual([2]);
  });

  it('rejects impossible window sizes and gaps in the history', () => {
    expect(() => windowDifferences([1, 2, 3], 0, 1)).toThrow(RangeError);
    expect(() => windowDifferences([1, 2, 3], 1, 1.5)).toThrow(RangeError);
    expect(() => windowDifferences([1, 2, 3], Number.NaN, 1)).toThrow(RangeError);
    expect(() => windowDifferences([1, 2, Number.NaN, 4, 5], 1, 1)).toThrow(/history\[2\]/);
    expect(() => windowDifferences([1, Infinity, 3, 4], 1, 1)).toThrow(RangeError);
  });
});

describe('observedDifference', () => {
  it('compares the after mean with the last nBefore samples before', () => {
    expect(observedDifference([100, 1, 2, 3], [5, 7], 3)).toBeCloseTo(6 - 2, 14);
    expect(observedDifference([0.1, 0.2], [0.3], 2)).toBeCloseTo(0.15, 15);
  });

  it('rejects too few samples', () => {
    expect(() => observedDifference([1, 2], [3], 3)).toThrow(RangeError);
    expect(() => observedDifference([1, 2], [], 2)).toThrow(RangeError);
    expect(() => observedDifference([1, 2], [3], 0)).toThrow(RangeError);
    expect(() => observedDifference([1, Number.NaN], [3], 2)).toThrow(RangeError);
  });
});

describe('minimumReferenceSize', () => {
  it('is ceil(1 / riskLevel), so that one member is a risk <= riskLevel', () => {
    expect(minimumReferenceSize(0.05)).toBe(20);
    expect(minimumReferenceSize(0.01)).toBe(100);
    expect(minimumReferenceSize(0.1)).toBe(10);
    expect(minimumReferenceSize(0.003)).toBe(334);
    expect(minimumReferenceSize(1 / 3)).toBe(3);
    expect(minimumReferenceSize(0.3)).toBe(4);
    fc.assert(
      fc.property(fc.double({ min: 1e-6, max: 0.999, noNaN: true }), (alpha) => {
        const m = minimumReferenceSize(alpha);
        expect(1 / m).toBeLessThanOrEqual(alpha);
        if (m > 1) expect(1 / (m - 1)).toBeGreaterThan(alpha);
      }),
    );
  });

  it('rejects risk levels outside (0, 1)', () => {
    for (const bad of [0, 1, -0.1, 1.5, Number.NaN]) {
      expect(() => minimumReferenceSize(bad)).toThrow(RangeError);
    }
  });
});

describe('referenceRisk', () => {
  // 10 differences, risk level 0.1 (minimum M = 10).
  const d = [-3, -2, -1, -1, 0, 1, 1, 1, 2, 4];

  it('counts each direction, ties included', () => {
    const r = referenceRisk(d, 1, { direction: 'rise', riskLevel: 0.1 });
    expect(r.status).toBe('ok');
    if (r.status !== 'ok') return;
    expect(r.countAtLeast).toBe(5); // 1, 1, 1, 2, 4
    expect(r.riskRise).toBe(0.5);
    expect(r.riskFall).toBe(0.8); // everything but 2 and 4
    expect(r.riskEither).toBe(0.9); // all but the 0
    expect(r.credible).toBe(false);

    const fall = referenceRisk(d, -2, { direction: 'fall', riskLevel: 0.2 });
    expect(fall.status === 'ok' && fall.countAtLeast).toBe(2); // -3, -2
    expect(fall.status === 'ok' && fall.risk).toBe(0.2);
    // A risk equal to the risk level is credible (risk <= riskLevel).
    expect(fall.status === 'ok' && fall.credible).toBe(true);

    const either = referenceRisk(d, -3, { direction: 'either', riskLevel: 0.1 });
    expect(either.status === 'ok' && either.countAtLeast).toBe(2); // -3, 4
    expect(either.status === 'ok' && either.riskRise).toBe(1);
  });

  it('puts the observed value at the top or bottom of the set', () => {
    const top = referenceRisk(d, 4, { direction: 'rise', riskLevel: 0.1 });
    expect(top.status === 'ok' && top.risk).toBe(0.1);
    expect(top.status === 'ok' && top.credible).toBe(true);
    const above = referenceRisk(d, 4.5, { direction: 'rise', riskLevel: 0.1 });
    expect(above.status === 'ok' && above.risk).toBe(0);
  });

  it('counts values equal in decimal but not in binary', () => {
    const sums = [0.1 + 0.2, ...Array.from({ length: 9 }, (_, i) => i)]; // 0.30000000000000004
    const fall = referenceRisk(sums, 0.3, { direction: 'fall', riskLevel: 0.1 });
    // 0, 0.30000000000000004: exact comparison would leave out the second.
    expect(fall.status === 'ok' && fall.countAtLeast).toBe(2);
    const exact = referenceRisk(sums, 0.3, { direction: 'fall', riskLevel: 0.1, tolerance: 0 });
    expect(exact.status === 'ok' && exact.countAtLeast).toBe(1);
  });

  it('does not call rounding noise on a flat history a credible shift', () => {
    const flat = new Float64Array(20);
    const r = referenceRisk(flat, 1e-15, { direction: 'either', riskLevel: 0.05 });
    expect(r.status === 'ok' && r.risk).toBe(1);
    const exact = referenceRisk(flat, 1e-15, {
      direction: 'either',
      riskLevel: 0.05,
      tolerance: 0,
    });
    expect(exact.status === 'ok' && exact.credible).toBe(true);
  });

  it('reports too little history instead of a risk it cannot resolve', () => {
    const r = referenceRisk(d.slice(0, 9), 5, { direction: 'rise', riskLevel: 0.1 });
    expect(r.status).toBe('not-enough-history');
    if (r.status !== 'not-enough-history') return;
    expect(r.m).toBe(9);
    expect(r.minimumM).toBe(10);
    expect(r.message).toContain('9');
    expect(r.message).toContain('10');
    expect(referenceRisk([], 0, { direction: 'either', riskLevel: 0.5 }).status).toBe(
      'not-enough-history',
    );
  });

  it('accepts a Float64Array', () => {
    const r = referenceRisk(Float64Array.from(d), 2, { direction: 'rise', riskLevel: 0.2 });
    expect(r.status === 'ok' && r.countAtLeast).toBe(2);
  });

  it('rejects impossible settings', () => {
    expect(() => referenceRisk(d, 1, { direction: 'rise', riskLevel: 0 })).toThrow(RangeError);
    expect(() => referenceRisk(d, Number.NaN, { direction: 'rise', riskLevel: 0.1 })).toThrow(
      RangeError,
    );
    expect(() => referenceRisk(d, 1, { direction: 'up' as 'rise', riskLevel: 0.1 })).toThrow(
      RangeError,
    );
    expect(() => referenceRisk(d, 1, { direction: 'rise', riskLevel: 0.1, tolerance: -1 })).toThrow(
      RangeError,
    );
    expect(() =>
      referenceRisk([...d, Number.NaN], 1, { direction: 'rise', riskLevel: 0.1 }),
    ).toThrow(RangeError);
  });
});

describe('dotPlotData', () => {
  it('gives every difference while there are few', () => {
    const data = dotPlotData([3, 1, 2]);
    expect(data).toEqual({ kind: 'points', values: [3, 1, 2] });
    expect(dotPlotData(new Float64Array(2000)).kind).toBe('points');
  });

  it('bins many differences from the smallest to the largest', () => {
    const d = normals(3, 5000, 0);
    const data = dotPlotData(d);
    expect(data.kind).toBe('bins');
    if (data.kind !== 'bins') return;
    expect(data.counts).toHaveLength(200);
    expect(data.total).toBe(5000);
    expect(data.counts.reduce((a, b) => a + b, 0)).toBe(5000);
    let min = Infinity;
    let max = -Infinity;
    for (const v of d) {
      min = Math.min(min, v);
      max = Math.max(max, v);
    }
    expect(data.lower).toBe(min);
    expect(data.lower + data.width * data.counts.length).toBeCloseTo(max, 12);
    expect(data.counts[0]).toBeGreaterThan(0);
    expect(data.counts[199]).toBeGreaterThan(0);
  });

  it('places values in the right bins', () => {
    const data = dotPlotData([0, 0.1, 0.5, 0.6, 0.99, 1], { maxPoints: 3, bins: 2 });
    expect(data).toEqual({ kind: 'bins', lower: 0, width: 0.5, counts: [2, 4], total: 6 });
  });

  it('gives one bin of width 0 when all differences are equal', () => {
    const data = dotPlotData([2, 2, 2], { maxPoints: 1 });
    expect(data).toEqual({ kind: 'bins', lower: 2, width: 0, counts: [3], total: 3 });
  });

  it('rejects impossible settings', () => {
    expect(() => dotPlotData([1], { bins: 0 })).toThrow(RangeError);
    expect(() => dotPlotData([1], { maxPoints: -1 })).toThrow(RangeError);
    expect(() => dotPlotData([1, Number.NaN], { maxPoints: 1 })).toThrow(RangeError);
  });
});
