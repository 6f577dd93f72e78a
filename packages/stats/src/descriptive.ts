/**
 * Mean, variance and standard deviation of a sample.
 *
 * Process tags often sit far from zero with little spread (a temperature of 351.20 +- 0.05 K),
 * where the textbook sum-of-squares formula cancels catastrophically. Both functions therefore
 * make two passes, the second one correcting the first (Chan, Golub & LeVeque, "Algorithms for
 * computing the sample variance", The American Statistician 37, 1983).
 */

/** Arithmetic mean; NaN for an empty sample. */
export function mean(x: ArrayLike<number>): number {
  const n = x.length;
  if (n === 0) return NaN;
  let sum = 0;
  for (let i = 0; i < n; i++) sum += x[i] ?? Number.NaN;
  const first = sum / n;
  // The rounding of the first sum is recovered from the residuals, which are small numbers.
  let residual = 0;
  for (let i = 0; i < n; i++) residual += (x[i] ?? Number.NaN) - first;
  return first + residual / n;
}

/** Sample variance with the n - 1 denominator; NaN when n < 2. */
export function sampleVariance(x: ArrayLike<number>): number {
  const n = x.length;
  if (n < 2) return NaN;
  const m = mean(x);
  let squares = 0;
  let residual = 0;
  for (let i = 0; i < n; i++) {
    const d = (x[i] ?? Number.NaN) - m;
    squares += d * d;
    residual += d;
  }
  // Corrected two-pass form: subtracting (sum d)^2 / n removes the error left in the mean.
  return (squares - (residual * residual) / n) / (n - 1);
}

/** Sample standard deviation, the square root of {@link sampleVariance}; NaN when n < 2. */
export function sampleStandardDeviation(x: ArrayLike<number>): number {
  return Math.sqrt(sampleVariance(x));
}
