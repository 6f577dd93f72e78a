import fc from 'fast-check';
import * as ss from 'simple-statistics';
import { describe, expect, it } from 'vitest';
import { mean, sampleStandardDeviation, sampleVariance } from './descriptive.js';

describe('mean, sampleVariance, sampleStandardDeviation', () => {
  it('reproduce a small example worked by hand', () => {
    // 2, 4, 4, 4, 5, 5, 7, 9: sum 40, mean 5, squared deviations 9+1+1+1+0+0+4+16 = 32, so the
    // sample variance is 32 / 7 (arithmetic done by hand).
    const x = [2, 4, 4, 4, 5, 5, 7, 9];
    expect(mean(x)).toBe(5);
    expect(sampleVariance(x)).toBeCloseTo(32 / 7, 15);
    expect(sampleStandardDeviation(x)).toBeCloseTo(Math.sqrt(32 / 7), 15);
  });

  it('keep full precision far from zero, where sum-of-squares formulas fail', () => {
    // 1e9 + (4, 7, 13, 16): deviations -6, -3, 3, 6 from 1e9 + 10, so the sample variance is
    // (36 + 9 + 9 + 36) / 3 = 30 (by hand; the textbook one-pass formula returns garbage here,
    // the standard illustration in Chan, Golub & LeVeque 1983).
    const x = new Float64Array([1e9 + 4, 1e9 + 7, 1e9 + 13, 1e9 + 16]);
    expect(mean(x)).toBe(1e9 + 10);
    expect(sampleVariance(x)).toBe(30);
    // Equal values have no spread at all, even when their sum is inexact in binary.
    expect(sampleVariance([0.1, 0.1, 0.1])).toBe(0);
  });

  it('agree with simple-statistics', () => {
    fc.assert(
      fc.property(
        fc.array(fc.double({ min: -1e6, max: 1e6, noNaN: true }), { minLength: 2, maxLength: 200 }),
        (values) => {
          // simple-statistics 7 is an independent implementation from the npm registry.
          const scale = Math.max(1, ...values.map(Math.abs));
          expect(Math.abs(mean(values) - ss.mean(values))).toBeLessThanOrEqual(1e-12 * scale);
          const expected = ss.sampleVariance(values);
          expect(Math.abs(sampleVariance(values) - expected)).toBeLessThanOrEqual(
            1e-9 * Math.max(expected, 1e-12 * scale * scale),
          );
        },
      ),
    );
  });

  it('return NaN when there are too few values', () => {
    expect(mean([])).toBeNaN();
    expect(sampleVariance([])).toBeNaN();
    expect(sampleVariance([3])).toBeNaN();
    expect(sampleStandardDeviation(new Float64Array(1))).toBeNaN();
    expect(mean([3])).toBe(3);
  });
});
