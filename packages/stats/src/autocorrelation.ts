/**
 * Lag-1 autocorrelation and the effective sample size it implies.
 *
 * Plant historians sample faster than most processes move, so neighbouring samples are usually
 * positively correlated. Welch's t test assumes independent samples; with r1 > 0 the standard
 * error it uses is too small and its p-value too small with it.
 */

import { mean } from './descriptive.js';

/**
 * r1 = sum_t (x_t - m)(x_{t+1} - m) / sum_t (x_t - m)^2 (the usual estimator, as in Box,
 * Jenkins & Reinsel, Time Series Analysis, section 2.1.4). NaN when n < 3 or all samples are
 * equal.
 */
export function lag1Autocorrelation(x: ArrayLike<number>): number {
  const n = x.length;
  if (n < 3) return NaN;
  const m = mean(x);
  let previous = (x[0] ?? Number.NaN) - m;
  let numerator = 0;
  let denominator = previous * previous;
  for (let i = 1; i < n; i++) {
    const current = (x[i] ?? Number.NaN) - m;
    numerator += previous * current;
    denominator += current * current;
    previous = current;
  }
  if (!(denominator > 0)) return NaN;
  return numerator / denominator;
}

/**
 * Effective number of independent samples n (1 - r1) / (1 + r1), the size for which the
 * variance of the mean of an AR(1) series equals that of independent samples (large-n form).
 *
 * - r1 <= 0 (or NaN, when r1 could not be estimated) returns n: negative correlation would
 *   inflate the count, and a test should never be made bolder by a noisy r1.
 * - The result is floored at 2, because the t test needs at least two samples, but never
 *   exceeds n.
 *
 * Throws RangeError when n is negative or not finite, or r1 lies outside [-1, 1].
 */
export function effectiveSampleSize(n: number, r1: number): number {
  if (!(n >= 0 && Number.isFinite(n))) {
    throw new RangeError(`effectiveSampleSize: n must be a finite number >= 0 (got ${n})`);
  }
  if (r1 < -1 || r1 > 1) {
    throw new RangeError(`effectiveSampleSize: r1 must lie in [-1, 1] (got ${r1})`);
  }
  if (Number.isNaN(r1) || r1 <= 0) return n;
  const shrunk = (n * (1 - r1)) / (1 + r1);
  return Math.min(n, Math.max(2, shrunk));
}

export interface AutocorrelationCheck {
  /** Number of samples. */
  n: number;
  /** Lag-1 autocorrelation, NaN when it cannot be estimated. */
  r1: number;
  /** 2 / sqrt(n): about the 95% band of r1 for independent samples. */
  limit: number;
  /** |r1| > limit. */
  flagged: boolean;
  /** {@link effectiveSampleSize} of the series (n when r1 is NaN). */
  effectiveN: number;
  /** One or two plain sentences for the engineer. */
  note: string;
}

function fixed(value: number, digits: number): string {
  return value.toFixed(digits);
}

/**
 * Checks whether a series is autocorrelated enough to distrust a test that assumes independent
 * samples. The limit 2 / sqrt(n) is the approximate 95% band of r1 for independent samples
 * (its standard error is about 1 / sqrt(n); Box, Jenkins & Reinsel, section 2.1.6).
 */
export function autocorrelationCheck(x: ArrayLike<number>): AutocorrelationCheck {
  const n = x.length;
  const r1 = lag1Autocorrelation(x);
  const limit = n > 0 ? 2 / Math.sqrt(n) : Infinity;
  if (Number.isNaN(r1)) {
    return {
      n,
      r1,
      limit,
      flagged: false,
      effectiveN: n,
      note:
        n < 3
          ? `Only ${n} samples: too few to judge whether neighbouring samples are correlated.`
          : 'All samples are equal, so their correlation cannot be judged.',
    };
  }
  const flagged = Math.abs(r1) > limit;
  const effectiveN = effectiveSampleSize(n, r1);
  const measured = `lag-1 autocorrelation r1 = ${fixed(r1, 2)}, limit ${fixed(limit, 3)}`;
  let note: string;
  if (!flagged) {
    note = `No sign that neighbouring samples are correlated (${measured}).`;
  } else if (r1 > 0) {
    note =
      `Neighbouring samples are correlated (${measured}), so the samples are not independent ` +
      `and Welch's t test will give a p-value that is too optimistic: the shift will look more ` +
      `certain than it is. The reference distribution method does not need independent samples ` +
      `and should be trusted instead; the t test on the effective sample size ` +
      `(about ${Math.round(effectiveN)} of ${n}) is a rougher alternative.`;
  } else {
    note =
      `Neighbouring samples alternate more than chance would give (${measured}), so the samples ` +
      `are not independent and Welch's t test cannot be taken at face value (with this negative ` +
      `correlation its p-value tends to be too cautious). The reference distribution method ` +
      `does not need independent samples and should be trusted instead.`;
  }
  return { n, r1, limit, flagged, effectiveN, note };
}
