/**
 * Short-term sigma from moving ranges |x_i - x_(i-1)|.
 *
 * Differences of neighbours cancel slow drifts and step changes, so these estimate the
 * sample-to-sample noise even when the series also contains the shift being tested for, where
 * the overall standard deviation would be inflated by the shift itself.
 */

import { scratch } from './scratch.js';
import { selectKth } from './select.js';

/**
 * d2 for subgroups of size 2: the mean of the range of two independent normal values is
 * d2 sigma with d2 = 2 / sqrt(pi) = 1.128 (tabulated as d2 in ASTM E2587 and Montgomery,
 * Introduction to Statistical Quality Control, Appendix Table VI).
 */
const D2_FOR_TWO = 1.128;

/**
 * The median of the range of two independent normal values is sqrt(2) z_0.75 sigma = 0.954
 * sigma (the median moving range constant used by Wheeler).
 */
const MEDIAN_RANGE_FOR_TWO = 0.954;

/** Mean moving range divided by d2 = 1.128; NaN when there are fewer than two samples. */
export function sigmaFromAverageMovingRange(x: ArrayLike<number>): number {
  const n = x.length;
  if (n < 2) return NaN;
  let sum = 0;
  let previous = x[0] ?? Number.NaN;
  for (let i = 1; i < n; i++) {
    const current = x[i] ?? Number.NaN;
    sum += Math.abs(current - previous);
    previous = current;
  }
  return sum / (n - 1) / D2_FOR_TWO;
}

/**
 * Median moving range divided by 0.954; NaN when there are fewer than two samples (or any
 * sample is NaN). The median ignores the few large moving ranges that a step change or a
 * spike produces, which is why it is preferred on plant data.
 */
export function sigmaFromMedianMovingRange(x: ArrayLike<number>): number {
  const n = x.length;
  if (n < 2) return NaN;
  const ranges = scratch('moving-ranges', n - 1);
  let previous = x[0] ?? Number.NaN;
  for (let i = 1; i < n; i++) {
    const current = x[i] ?? Number.NaN;
    const range = Math.abs(current - previous);
    if (Number.isNaN(range)) return NaN;
    ranges[i - 1] = range;
    previous = current;
  }
  return medianInPlace(ranges) / MEDIAN_RANGE_FOR_TWO;
}

/**
 * Median by selection in expected O(n) time; the array is reordered. Sorting 10^6 moving ranges
 * would cost O(n log n) for no use.
 */
function medianInPlace(values: Float64Array): number {
  const n = values.length;
  const upper = n >> 1;
  const upperValue = selectKth(values, upper);
  if (n % 2 === 1) return upperValue;
  // After selection everything left of `upper` is <= it, so the lower middle is their maximum.
  let lowerValue = -Infinity;
  for (let i = 0; i < upper; i++) {
    const v = values[i] ?? Number.NaN;
    if (v > lowerValue) lowerValue = v;
  }
  return (lowerValue + upperValue) / 2;
}
