/**
 * The reference distribution of historical window differences: Box, Hunter & Hunter, Statistics
 * for Experimenters, 2nd ed. (Wiley, 2005), §3.1.
 *
 * Instead of assuming a model (normality, independence) for the process, the tag's own in-control
 * history is cut into every pair of adjacent windows of the same sizes as the comparison being
 * judged (nBefore samples, then nAfter samples). The differences of their means show how large a
 * difference the process produces by itself, with its real autocorrelation and non-normality. The
 * share of them at least as large as the observed difference is the risk of calling a shift real
 * when it is not.
 */

export type Direction = 'rise' | 'fall' | 'either';

// ---------------------------------------------------------------------------------------------
// Argument checks shared with samples-needed.ts (not part of the package's public API).

/** @internal */
export function requireWholeNumber(name: string, value: number, min: number): void {
  if (!Number.isInteger(value) || value < min) {
    throw new RangeError(`${name} must be a whole number >= ${min}, got ${value}`);
  }
}

/** @internal */
export function requireRiskLevel(riskLevel: number): void {
  if (!(riskLevel > 0 && riskLevel < 1)) {
    throw new RangeError(`riskLevel must lie strictly between 0 and 1, got ${riskLevel}`);
  }
}

/** @internal */
export function requireDirection(direction: string): void {
  if (direction !== 'rise' && direction !== 'fall' && direction !== 'either') {
    throw new RangeError(`direction must be 'rise', 'fall' or 'either', got '${direction}'`);
  }
}

/**
 * @internal
 * Mean of at most ~1024 evenly spread finite samples, or 0. Used as a centre subtracted from the
 * samples before window sums are formed, so the sums are made of small deviations rather than of
 * the large level of the tag and the difference of two means does not cancel away leading digits.
 * Any value near the level serves, so there is no need to spend a full pass on it.
 */
export function roughCentre(history: ArrayLike<number>): number {
  const n = history.length;
  if (n === 0) return 0;
  const stride = Math.max(1, Math.floor(n / 1024));
  let sum = 0;
  let count = 0;
  for (let i = 0; i < n; i += stride) {
    const x = history[i] ?? Number.NaN;
    if (Number.isFinite(x)) {
      sum += x;
      count += 1;
    }
  }
  return count === 0 ? 0 : sum / count;
}

/**
 * @internal
 * The error for a history whose sums came out non-finite. Hot loops check only their final sums,
 * since a NaN or infinite sample poisons a running sum for good (NaN stays NaN, and an infinity
 * that enters and leaves a window leaves Infinity - Infinity = NaN); this slow path then finds it.
 */
export function nonFiniteHistory(history: ArrayLike<number>): RangeError {
  for (let i = 0; i < history.length; i += 1) {
    const x = history[i] ?? Number.NaN;
    if (!Number.isFinite(x)) {
      return new RangeError(`history[${i}] is ${x}, not a finite number; remove gaps first`);
    }
  }
  return new RangeError('history values are too large to sum in double precision');
}

// ---------------------------------------------------------------------------------------------
// Public API.

/**
 * d_j = mean(x[j+nBefore .. j+nBefore+nAfter-1]) - mean(x[j .. j+nBefore-1]) for j = 0..M-1 with
 * M = N - nBefore - nAfter + 1; empty when M <= 0. Throws RangeError on window sizes < 1 or a
 * non-finite sample inside the windows.
 *
 * O(N) with two running window sums that slide one sample per step. This is the prefix-sum method
 * with the prefix differenced on the fly: it needs no N-long prefix array, whose fresh memory costs
 * more than the arithmetic at 10^6 samples. Precision, so that 10^6 samples of value ~1e4 give the
 * same differences as summing each window directly:
 * - samples are centred on a rough mean first (roughCentre), so the sums hold deviations of the
 *   size of the noise, not the level;
 * - each sum carries the exact rounding error of every update (Knuth's TwoSum, branch-free), so
 *   the rounding of a million updates does not accumulate; that also covers a drifting tag, whose
 *   centred sums still grow large.
 */
export function windowDifferences(
  history: ArrayLike<number>,
  nBefore: number,
  nAfter: number,
  into?: Float64Array,
): Float64Array {
  requireWholeNumber('nBefore', nBefore, 1);
  requireWholeNumber('nAfter', nAfter, 1);
  const m = history.length - nBefore - nAfter + 1;
  if (m <= 0) return new Float64Array(0);
  if (into !== undefined && into.length < m) {
    throw new RangeError(`The output array holds ${into.length} differences; ${m} are needed.`);
  }
  const centre = roughCentre(history);
  const invB = 1 / nBefore;
  const invA = 1 / nAfter;
  // A caller that recomputes often passes its own array, since fresh memory costs more than the sums.
  const out = into === undefined ? new Float64Array(m) : into.subarray(0, m);
  // Running sums (s) of centred samples in the before and after windows, and their accumulated
  // rounding errors (c).
  let sB = 0;
  let cB = 0;
  let sA = 0;
  let cA = 0;
  for (let i = 0; i < nBefore; i += 1) {
    const y = (history[i] ?? Number.NaN) - centre;
    const t = sB + y;
    const v = t - sB;
    cB += sB - (t - v) + (y - v);
    sB = t;
  }
  const last = nBefore + nAfter;
  for (let i = nBefore; i < last; i += 1) {
    const y = (history[i] ?? Number.NaN) - centre;
    const t = sA + y;
    const v = t - sA;
    cA += sA - (t - v) + (y - v);
    sA = t;
  }
  out[0] = (sA + cA) * invA - (sB + cB) * invB;
  for (let j = 1; j < m; j += 1) {
    // The sample at the boundary leaves the after-window and enters the before-window.
    const yOut = (history[j - 1] ?? Number.NaN) - centre;
    const yMid = (history[j + nBefore - 1] ?? Number.NaN) - centre;
    const yIn = (history[j + last - 1] ?? Number.NaN) - centre;
    // Each change is one rounding of small centred values, then one error-free addition.
    const dB = yMid - yOut;
    const tB = sB + dB;
    const vB = tB - sB;
    cB += sB - (tB - vB) + (dB - vB);
    sB = tB;
    const dA = yIn - yMid;
    const tA = sA + dA;
    const vA = tA - sA;
    cA += sA - (tA - vA) + (dA - vA);
    sA = tA;
    out[j] = (sA + cA) * invA - (sB + cB) * invB;
  }
  if (!Number.isFinite(sA + cA + sB + cB)) throw nonFiniteHistory(history);
  return out;
}

/**
 * mean(after) - mean(the last nBefore samples of before): the difference to judge against the
 * reference distribution built with the same window sizes.
 */
export function observedDifference(
  before: ArrayLike<number>,
  after: ArrayLike<number>,
  nBefore: number,
): number {
  requireWholeNumber('nBefore', nBefore, 1);
  if (before.length < nBefore) {
    throw new RangeError(`before has ${before.length} samples, fewer than nBefore = ${nBefore}`);
  }
  if (after.length === 0) throw new RangeError('after holds no samples');
  const start = before.length - nBefore;
  // Centred on a sample so the means are formed from small deviations, as in windowDifferences,
  // which keeps the two computations in step when the same windows are fed to both.
  const centre = before[start] ?? Number.NaN;
  const meanBefore = centredSum(before, start, before.length, centre) / nBefore;
  const meanAfter = centredSum(after, 0, after.length, centre) / after.length;
  const d = meanAfter - meanBefore;
  if (!Number.isFinite(d)) throw new RangeError('before or after holds a non-finite sample');
  return d;
}

/** Compensated (TwoSum) sum of (values[i] - centre) for i in [from, to). */
function centredSum(values: ArrayLike<number>, from: number, to: number, centre: number): number {
  let sum = 0;
  let err = 0;
  for (let i = from; i < to; i += 1) {
    const y = (values[i] ?? Number.NaN) - centre;
    const t = sum + y;
    const v = t - sum;
    err += sum - (t - v) + (y - v);
    sum = t;
  }
  return sum + err;
}

/**
 * Smallest number of reference differences M that can resolve riskLevel: ceil(1 / riskLevel), so a
 * single difference at or beyond the observed one is a risk 1 / M <= riskLevel. Computed so that
 * 1 / M <= riskLevel holds in floating point, exactly as referenceRisk compares.
 */
export function minimumReferenceSize(riskLevel: number): number {
  requireRiskLevel(riskLevel);
  let m = Math.ceil(1 / riskLevel);
  while (m > 1 && 1 / (m - 1) <= riskLevel) m -= 1;
  while (1 / m > riskLevel) m += 1;
  return m;
}

export interface ReferenceRiskOptions {
  direction: Direction;
  riskLevel: number;
  tolerance?: number;
}

export type ReferenceRisk =
  | {
      status: 'ok';
      m: number;
      observed: number;
      direction: Direction;
      riskLevel: number;
      /** Count in the chosen direction. */
      countAtLeast: number;
      /** Share in the chosen direction. */
      risk: number;
      riskRise: number;
      riskFall: number;
      riskEither: number;
      /** risk <= riskLevel. */
      credible: boolean;
      minimumM: number;
    }
  | {
      status: 'not-enough-history';
      m: number;
      minimumM: number;
      observed: number;
      direction: Direction;
      riskLevel: number;
      message: string;
    };

const RELATIVE_TOLERANCE = 1e-9;

/**
 * Default tie tolerance: 1e-9 * max(1, |observed|, mean |d|).
 *
 * Why a tolerance at all: reference differences that are equal to the observed difference must
 * count (the risk is the share "at least as large"). But values equal in decimal are seldom equal
 * in binary: the user's 1.33 and a window difference of the Box, Hunter & Hunter yields that is
 * 1.33 on paper (1.3299999999999983 in binary) differ, and exact comparison would drop that member.
 * Binary rounding of decimal data and of window means is about 1e-16 of the level of the data;
 * unless the level exceeds the spread by a factor of ~10^6 that is far below 1e-9 of the
 * differences' scale, while genuinely different values in recorded data (a few significant digits)
 * are far above it, so the tolerance catches the decimal ties and nothing else. The floor of 1
 * covers a flat history: when every difference is 0 and the observed one is rounding noise such as
 * 1e-15, a purely relative tolerance would call that noise a credible shift. Callers with data in
 * very small units, or a level far above the spread, pass their own tolerance.
 */
function defaultTolerance(observed: number, differences: ArrayLike<number>): number {
  let meanAbs = 0;
  const m = differences.length;
  if (m > 0) {
    let sum = 0;
    for (let i = 0; i < m; i += 1) sum += Math.abs(differences[i] ?? Number.NaN);
    meanAbs = sum / m;
  }
  return RELATIVE_TOLERANCE * Math.max(1, Math.abs(observed), meanAbs);
}

/**
 * Risk of the observed difference under the reference distribution, in all three directions:
 * rise: share with d >= observed; fall: share with d <= observed; either: share with
 * |d| >= |observed|. Ties count (within `tolerance`, see defaultTolerance). O(M), no sorting.
 * Returns status 'not-enough-history' when M < minimumReferenceSize(riskLevel).
 */
export function referenceRisk(
  differences: ArrayLike<number>,
  observed: number,
  options: ReferenceRiskOptions,
): ReferenceRisk {
  const { direction, riskLevel } = options;
  requireDirection(direction);
  requireRiskLevel(riskLevel);
  if (!Number.isFinite(observed)) {
    throw new RangeError(`observed difference must be a finite number, got ${observed}`);
  }
  if (
    options.tolerance !== undefined &&
    !(Number.isFinite(options.tolerance) && options.tolerance >= 0)
  ) {
    throw new RangeError(`tolerance must be a finite number >= 0, got ${options.tolerance}`);
  }
  const m = differences.length;
  const minimumM = minimumReferenceSize(riskLevel);
  if (m < minimumM) {
    return {
      status: 'not-enough-history',
      m,
      minimumM,
      observed,
      direction,
      riskLevel,
      message:
        `The history gives ${m} reference differences; at least ${minimumM} are needed to ` +
        `resolve a risk level of ${riskLevel}. Use a longer history or shorter windows.`,
    };
  }
  const tolerance = options.tolerance ?? defaultTolerance(observed, differences);
  const riseBound = observed - tolerance;
  const fallBound = observed + tolerance;
  const eitherBound = Math.abs(observed) - tolerance;
  let rise = 0;
  let fall = 0;
  let either = 0;
  for (let i = 0; i < m; i += 1) {
    const d = differences[i] ?? Number.NaN;
    // A NaN would silently count nowhere and make the shift look more credible.
    if (!Number.isFinite(d)) throw nonFiniteDifference(i, d);
    if (d >= riseBound) rise += 1;
    if (d <= fallBound) fall += 1;
    if (Math.abs(d) >= eitherBound) either += 1;
  }
  const countAtLeast = direction === 'rise' ? rise : direction === 'fall' ? fall : either;
  const risk = countAtLeast / m;
  return {
    status: 'ok',
    m,
    observed,
    direction,
    riskLevel,
    countAtLeast,
    risk,
    riskRise: rise / m,
    riskFall: fall / m,
    riskEither: either / m,
    credible: risk <= riskLevel,
    minimumM,
  };
}

function nonFiniteDifference(index: number, value: number): RangeError {
  return new RangeError(`differences[${index}] is ${value}, not a finite number`);
}

export type DotPlotData =
  | { kind: 'points'; values: number[] }
  | { kind: 'bins'; lower: number; width: number; counts: number[]; total: number };

/**
 * Data for the dot plot of the reference distribution: every difference while there are at most
 * maxPoints (default 2000) of them, otherwise a histogram of `bins` (default 200) equal bins from
 * the smallest to the largest difference (bin i covers [lower + i·width, lower + (i+1)·width), the
 * last one closed). When all differences are equal there is one bin of width 0.
 */
export function dotPlotData(
  differences: ArrayLike<number>,
  options?: { maxPoints?: number; bins?: number },
): DotPlotData {
  const maxPoints = options?.maxPoints ?? 2000;
  const bins = options?.bins ?? 200;
  requireWholeNumber('maxPoints', maxPoints, 0);
  requireWholeNumber('bins', bins, 1);
  const m = differences.length;
  if (m <= maxPoints) return { kind: 'points', values: Array.from(differences) };
  let min = Infinity;
  let max = -Infinity;
  for (let i = 0; i < m; i += 1) {
    const d = differences[i] ?? Number.NaN;
    if (!Number.isFinite(d)) throw nonFiniteDifference(i, d);
    if (d < min) min = d;
    if (d > max) max = d;
  }
  if (!(max > min)) return { kind: 'bins', lower: min, width: 0, counts: [m], total: m };
  const width = (max - min) / bins;
  const counts = new Array<number>(bins).fill(0);
  const scale = 1 / width;
  for (let i = 0; i < m; i += 1) {
    let b = Math.floor(((differences[i] ?? Number.NaN) - min) * scale);
    // Rounding can push the maximum (or a value at a bin edge) one bin too far.
    if (b >= bins) b = bins - 1;
    else if (b < 0) b = 0;
    counts[b] = (counts[b] ?? 0) + 1;
  }
  return { kind: 'bins', lower: min, width, counts, total: m };
}
