/**
 * Welch's two-sample t test for a shift in the mean between a "before" and an "after" period
 * (B. L. Welch, "The generalization of 'Student's' problem when several different population
 * variances are involved", Biometrika 34, 1947), with Satterthwaite's degrees of freedom.
 */

import { mean, sampleVariance } from './descriptive.js';
import { studentTCdf, studentTQuantile } from './distributions.js';

export interface WelchResult {
  nBefore: number;
  nAfter: number;
  meanBefore: number;
  meanAfter: number;
  sdBefore: number;
  sdAfter: number;
  /** meanAfter - meanBefore. */
  shift: number;
  standardError: number;
  t: number;
  /** Welch-Satterthwaite degrees of freedom. */
  df: number;
  pTwoSided: number;
  /** P(T >= t): the one-sided p-value for a rise. */
  pRise: number;
  /** P(T <= t): the one-sided p-value for a fall. */
  pFall: number;
  confidence: number;
  /** Confidence interval of the shift. */
  ci: { lower: number; upper: number };
  /** The effective sizes used in place of the sample counts, or null when none were given. */
  effectiveSizes: { before: number; after: number } | null;
}

export interface WelchOptions {
  /** Confidence level of the interval, in (0, 1); default 0.95. */
  confidence?: number;
  /**
   * Effective sample sizes (for autocorrelated samples) to use in place of the counts: the
   * standard error becomes sqrt(s1^2/n1_eff + s2^2/n2_eff) and the degrees of freedom use
   * n_eff - 1. Each must be > 1 and not above its group's count.
   */
  effectiveSizes?: { before: number; after: number };
}

function checkEffectiveSize(value: number, count: number, group: string): void {
  if (!(value > 1 && value <= count)) {
    throw new RangeError(
      `welchTest: effective size of the ${group} group must be > 1 and <= its ${count} samples ` +
        `(got ${value})`,
    );
  }
}

/**
 * Welch's t test of after against before.
 *
 * Throws RangeError when either group has fewer than 2 samples, the confidence is outside
 * (0, 1), or an effective size is out of range.
 *
 * When both groups have zero variance the standard error is 0 and the df undefined (NaN). The
 * result is then still returned, not thrown: if the means differ, t = +-Infinity with
 * pTwoSided = 0 and the one-sided p-values 0 or 1; if they are equal, t and all p-values are
 * NaN. The interval collapses to the shift itself in both cases.
 */
export function welchTest(
  before: ArrayLike<number>,
  after: ArrayLike<number>,
  options: WelchOptions = {},
): WelchResult {
  const nBefore = before.length;
  const nAfter = after.length;
  if (nBefore < 2 || nAfter < 2) {
    throw new RangeError(
      `welchTest: each group needs at least 2 samples (before: ${nBefore}, after: ${nAfter})`,
    );
  }
  const confidence = options.confidence ?? 0.95;
  if (!(confidence > 0 && confidence < 1)) {
    throw new RangeError(`welchTest: confidence must lie in (0, 1) (got ${confidence})`);
  }
  const sizes = options.effectiveSizes;
  if (sizes !== undefined) {
    checkEffectiveSize(sizes.before, nBefore, 'before');
    checkEffectiveSize(sizes.after, nAfter, 'after');
  }
  const sizeBefore = sizes?.before ?? nBefore;
  const sizeAfter = sizes?.after ?? nAfter;

  const meanBefore = mean(before);
  const meanAfter = mean(after);
  const varBefore = sampleVariance(before);
  const varAfter = sampleVariance(after);
  const shift = meanAfter - meanBefore;

  const termBefore = varBefore / sizeBefore;
  const termAfter = varAfter / sizeAfter;
  const variance = termBefore + termAfter;
  const standardError = Math.sqrt(variance);
  // Satterthwaite's (v1 + v2)^2 / (v1^2/(n1-1) + v2^2/(n2-1)), written in the shares of the
  // variance so that squaring cannot underflow or overflow for data of extreme scale.
  const shareBefore = termBefore / variance;
  const shareAfter = termAfter / variance;
  const df =
    1 /
    ((shareBefore * shareBefore) / (sizeBefore - 1) + (shareAfter * shareAfter) / (sizeAfter - 1));

  let t: number;
  let pTwoSided: number;
  let pRise: number;
  let pFall: number;
  let halfWidth: number;
  if (standardError === 0) {
    t = shift === 0 ? NaN : shift > 0 ? Infinity : -Infinity;
    pRise = Number.isNaN(t) ? NaN : t > 0 ? 0 : 1;
    pFall = Number.isNaN(t) ? NaN : t < 0 ? 0 : 1;
    pTwoSided = Number.isNaN(t) ? NaN : 0;
    halfWidth = 0;
  } else {
    t = shift / standardError;
    // Each tail is computed directly from its own side, never as 1 - (the other one).
    pRise = studentTCdf(-t, df);
    pFall = studentTCdf(t, df);
    pTwoSided = Math.min(1, 2 * studentTCdf(-Math.abs(t), df));
    halfWidth = -studentTQuantile((1 - confidence) / 2, df) * standardError;
  }

  return {
    nBefore,
    nAfter,
    meanBefore,
    meanAfter,
    sdBefore: Math.sqrt(varBefore),
    sdAfter: Math.sqrt(varAfter),
    shift,
    standardError,
    t,
    df,
    pTwoSided,
    pRise,
    pFall,
    confidence,
    ci: { lower: shift - halfWidth, upper: shift + halfWidth },
    effectiveSizes: sizes === undefined ? null : { before: sizes.before, after: sizes.after },
  };
}
