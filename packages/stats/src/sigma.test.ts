import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { sampleStandardDeviation } from './descriptive.js';
import { normalQuantile } from './distributions.js';
import { ar1Series, seededRandom } from './random.js';
import { sigmaFromAverageMovingRange, sigmaFromMedianMovingRange } from './sigma.js';

/** Independent N(0, sigma^2) values from the package's seeded generator. */
function normalSeries(n: number, sigma: number, seed: number): Float64Array {
  return ar1Series(seededRandom(seed), n, 0, sigma, 0);
}

function sortedMedian(values: readonly number[]): number {
  const sorted = [...values].sort((a, b) => a - b);
  const mid = sorted.length >> 1;
  return sorted.length % 2 === 1
    ? (sorted[mid] ?? Number.NaN)
    : ((sorted[mid - 1] ?? Number.NaN) + (sorted[mid] ?? Number.NaN)) / 2;
}

describe('moving-range constants', () => {
  it('d2 = 1.128 is the mean range of two normal values, 2 / sqrt(pi)', () => {
    // d2 for n = 2 is tabulated as 1.128 in ASTM E2587 and in Montgomery, Introduction to
    // Statistical Quality Control, Appendix Table VI (from memory); it equals E|X1 - X2| / sigma
    // = sqrt(2) * sqrt(2 / pi) = 2 / sqrt(pi) for independent normal X1, X2.
    expect((2 / Math.sqrt(Math.PI)).toFixed(3)).toBe('1.128');
    expect(sigmaFromAverageMovingRange([0, 1])).toBe(1 / 1.128);
  });

  it('0.954 is the median range of two normal values, sqrt(2) z_0.75', () => {
    // The median moving range constant 0.954 (Wheeler, from memory; common practice) is the
    // median of |X1 - X2| / sigma = sqrt(2) |Z|, whose median is sqrt(2) times the upper quartile
    // of the standard normal.
    expect((Math.SQRT2 * normalQuantile(0.75)).toFixed(3)).toBe('0.954');
    expect(sigmaFromMedianMovingRange([0, 1])).toBe(1 / 0.954);
  });
});

describe('sigma estimators on independent normal data', () => {
  it('all three are close to the true sigma', () => {
    const sigma = 2.5;
    const x = normalSeries(40_000, sigma, 20240611);
    // Each estimator has a relative standard error of about 1 / sqrt(n) (0.5% here, somewhat
    // more for the median): 4% is many standard errors (common practice).
    expect(Math.abs(sampleStandardDeviation(x) / sigma - 1)).toBeLessThan(0.04);
    expect(Math.abs(sigmaFromAverageMovingRange(x) / sigma - 1)).toBeLessThan(0.04);
    expect(Math.abs(sigmaFromMedianMovingRange(x) / sigma - 1)).toBeLessThan(0.04);
  });

  it('a step change inflates the standard deviation far more than the median moving range', () => {
    // A step of 5 sigma halfway through: the overall SD becomes about sqrt(1 + 2.5^2) = 2.7
    // sigma while only one moving range sees the step, which is why robust short-term
    // estimators are used to judge a shift (common practice).
    const sigma = 1;
    const x = normalSeries(2000, sigma, 7);
    for (let i = 1000; i < x.length; i++) x[i] = (x[i] ?? 0) + 5 * sigma;
    expect(sampleStandardDeviation(x)).toBeGreaterThan(2.4 * sigma);
    expect(Math.abs(sigmaFromMedianMovingRange(x) / sigma - 1)).toBeLessThan(0.1);
    expect(Math.abs(sigmaFromAverageMovingRange(x) / sigma - 1)).toBeLessThan(0.1);
  });
});

describe('sigmaFromMedianMovingRange', () => {
  it('takes the exact median of the moving ranges, duplicates included', () => {
    fc.assert(
      fc.property(
        fc.array(fc.integer({ min: -20, max: 20 }), { minLength: 2, maxLength: 300 }),
        (values) => {
          // Small integers: many equal moving ranges, and exact arithmetic.
          const ranges = values.slice(1).map((v, i) => Math.abs(v - (values[i] ?? 0)));
          expect(sigmaFromMedianMovingRange(values)).toBe(sortedMedian(ranges) / 0.954);
        },
      ),
    );
  });

  it('handles a million moving ranges quickly and exactly', () => {
    const x = normalSeries(1_000_001, 1, 99);
    const start = performance.now();
    const fast = sigmaFromMedianMovingRange(x);
    const elapsed = performance.now() - start;
    const ranges = new Float64Array(x.length - 1);
    for (let i = 1; i < x.length; i++) ranges[i - 1] = Math.abs((x[i] ?? 0) - (x[i - 1] ?? 0));
    ranges.sort();
    const half = ranges.length / 2;
    expect(fast).toBe(((ranges[half - 1] ?? 0) + (ranges[half] ?? 0)) / 2 / 0.954);
    // Selection is linear; a generous bound keeps slow CI machines green.
    expect(elapsed).toBeLessThan(500);
    // Quantised data: 0, 4, 3, 2, 1, 0, 4, ... has moving ranges 4, 1, 1, 1, 1, 4, ..., so a
    // million ranges with two distinct values and median 1.
    const steps = new Float64Array(1_000_001);
    for (let i = 0; i < steps.length; i++) steps[i] = (i * 4) % 5;
    expect(sigmaFromMedianMovingRange(steps)).toBe(1 / 0.954);
  });

  it('returns NaN for fewer than two samples or NaN data', () => {
    expect(sigmaFromMedianMovingRange([1])).toBeNaN();
    expect(sigmaFromAverageMovingRange([])).toBeNaN();
    expect(sigmaFromMedianMovingRange([1, Number.NaN, 3])).toBeNaN();
  });
});
