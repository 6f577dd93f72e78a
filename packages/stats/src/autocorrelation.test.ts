import { describe, expect, it } from 'vitest';
import {
  autocorrelationCheck,
  effectiveSampleSize,
  lag1Autocorrelation,
} from './autocorrelation.js';
import { ar1Series, seededRandom } from './random.js';

/** AR(1) series with unit variance from the package's seeded generator. */
function ar1(n: number, phi: number, seed: number): Float64Array {
  return ar1Series(seededRandom(seed), n, 0, 1, phi);
}

describe('lag1Autocorrelation', () => {
  it('estimates phi on an AR(1) series', () => {
    // For AR(1) the lag-1 autocorrelation is phi, and r1 has standard error about
    // sqrt((1 - phi^2) / n) (Bartlett's formula; Box, Jenkins & Reinsel, Time Series Analysis,
    // section 2.1.6, from memory): 0.011 here, so 0.04 is over three standard errors.
    const r1 = lag1Autocorrelation(ar1(5000, 0.6, 12345));
    expect(Math.abs(r1 - 0.6)).toBeLessThan(0.04);
  });

  it('matches a small example worked by hand', () => {
    // 1, 2, 3, 4: mean 2.5, deviations -1.5, -0.5, 0.5, 1.5; lagged products 0.75 - 0.25 + 0.75
    // = 1.25 over squares 5, so r1 = 0.25 (arithmetic by hand).
    expect(lag1Autocorrelation([1, 2, 3, 4])).toBeCloseTo(0.25, 15);
    // Alternating values: products -1 -1 -1 over 4, r1 = -0.75.
    expect(lag1Autocorrelation(new Float64Array([1, -1, 1, -1]))).toBeCloseTo(-0.75, 15);
  });

  it('is NaN for fewer than three samples or no variation', () => {
    expect(lag1Autocorrelation([1, 2])).toBeNaN();
    expect(lag1Autocorrelation([3, 3, 3, 3])).toBeNaN();
  });
});

describe('effectiveSampleSize', () => {
  it('shrinks n by (1 - r1) / (1 + r1)', () => {
    // n (1 - r1) / (1 + r1): the AR(1) variance inflation of the mean, (1 + phi) / (1 - phi)
    // (common practice; e.g. Box, Jenkins & Reinsel).
    expect(effectiveSampleSize(5000, 0.6)).toBeCloseTo(1250, 9);
    expect(effectiveSampleSize(100, 1 / 3)).toBeCloseTo(50, 12);
  });

  it('never inflates n, floors at 2 and never exceeds n', () => {
    expect(effectiveSampleSize(100, -0.5)).toBe(100);
    expect(effectiveSampleSize(100, 0)).toBe(100);
    expect(effectiveSampleSize(100, Number.NaN)).toBe(100);
    expect(effectiveSampleSize(100, 0.999)).toBe(2);
    expect(effectiveSampleSize(100, 1)).toBe(2);
    expect(effectiveSampleSize(1, 0.9)).toBe(1);
  });

  it('rejects impossible arguments', () => {
    expect(() => effectiveSampleSize(-1, 0.2)).toThrow(RangeError);
    expect(() => effectiveSampleSize(Infinity, 0.2)).toThrow(RangeError);
    expect(() => effectiveSampleSize(10, 1.5)).toThrow(RangeError);
    expect(() => effectiveSampleSize(10, -1.5)).toThrow(RangeError);
  });
});

describe('autocorrelationCheck', () => {
  it('flags an AR(1) series and says why Welch is not to be trusted', () => {
    const check = autocorrelationCheck(ar1(5000, 0.6, 777));
    expect(check.n).toBe(5000);
    expect(check.limit).toBeCloseTo(2 / Math.sqrt(5000), 15);
    expect(check.flagged).toBe(true);
    expect(check.effectiveN).toBeCloseTo(effectiveSampleSize(5000, check.r1), 9);
    expect(check.effectiveN).toBeLessThan(1500);
    expect(check.note).toMatch(/not independent/);
    expect(check.note).toMatch(/too optimistic/);
    expect(check.note).toMatch(/reference distribution/);
  });

  it('flags independent samples at about the 5% rate the 2 / sqrt(n) limit implies', () => {
    // For independent samples r1 is about N(0, 1/n), so |r1| > 2 / sqrt(n) in about 4.6% of
    // series (common practice; Box, Jenkins & Reinsel, section 2.1.6, from memory). 400 seeded
    // series of 500.
    let flagged = 0;
    for (let seed = 1; seed <= 400; seed++) {
      if (autocorrelationCheck(ar1(500, 0, seed)).flagged) flagged++;
    }
    expect(flagged / 400).toBeGreaterThan(0.01);
    expect(flagged / 400).toBeLessThan(0.1);
  });

  it('explains an unflagged series and a negative correlation in plain words', () => {
    const quiet = autocorrelationCheck(ar1(2000, 0, 4));
    expect(quiet.flagged).toBe(false);
    expect(quiet.effectiveN).toBeLessThanOrEqual(2000);
    expect(quiet.note).toMatch(/No sign/);
    const alternating = autocorrelationCheck(ar1(2000, -0.5, 5));
    expect(alternating.flagged).toBe(true);
    expect(alternating.effectiveN).toBe(2000);
    expect(alternating.note).toMatch(/not independent/);
    expect(alternating.note).toMatch(/reference distribution/);
  });

  it('reports too few or constant samples without flagging', () => {
    const short = autocorrelationCheck([1, 2]);
    expect(short.flagged).toBe(false);
    expect(short.r1).toBeNaN();
    expect(short.effectiveN).toBe(2);
    const flat = autocorrelationCheck([5, 5, 5, 5, 5]);
    expect(flat.flagged).toBe(false);
    expect(flat.note).toMatch(/equal/);
    expect(autocorrelationCheck([]).limit).toBe(Infinity);
  });
});
