/**
 * How many samples after a change are needed before the reference distribution (Box, Hunter &
 * Hunter, Statistics for Experimenters, 2nd ed., §3.1) can call a shift of a given size real at the
 * chosen risk level.
 *
 * For an after-window of n_B samples the reference differences d_j(nBefore, n_B) of the in-control
 * history show how far the process wanders by itself. A real shift s reaches the risk level once s
 * lies beyond the history's α point of those differences (quantile convention in select.ts): for a
 * rise, once the upper α point is below s; for a fall, once the lower α point is above s; for
 * either, once the upper α point of |d| is below |s|. The answer is the smallest such n_B.
 */

import { scratch } from './scratch.js';
import type { Direction } from './reference-distribution.js';
import {
  minimumReferenceSize,
  nonFiniteHistory,
  requireDirection,
  requireRiskLevel,
  requireWholeNumber,
  roughCentre,
} from './reference-distribution.js';
import { allowedExceedances, lowerQuantile, upperQuantile } from './select.js';

export interface SamplesNeededInput {
  /** In-control history before the change. */
  history: ArrayLike<number>;
  nBefore: number;
  /** Size of shift to detect (signed: the estimate, or the smallest shift worth having). */
  shift: number;
  direction: Direction;
  riskLevel: number;
  /** Samples already gathered after the change (>= 0). */
  nAfterNow: number;
  /**
   * Cap on the after-window. Default, and upper limit in any case: the largest n_B that leaves
   * M >= minimumReferenceSize(riskLevel) and M >= nBefore + n_B reference differences (see below).
   */
  maxNAfter?: number;
}

/**
 * nAfter: the smallest after-window that reaches the risk level for the given shift (also when it
 * is already reached); more: samples still to gather, nAfter - nAfterNow. largestNAfterTried is 0
 * when no search was possible (zero or wrong-signed shift, history too short).
 */
export type SamplesNeeded =
  | { status: 'reached'; nAfter: number; more: 0 }
  | { status: 'reachable'; nAfter: number; more: number }
  | { status: 'not-reachable'; reason: string; largestNAfterTried: number };

/**
 * Size of the strided subset of window positions used while searching. Windows that overlap share
 * most of their samples, so neighbouring differences are nearly copies of each other: 16k evenly
 * spread positions estimate the α point almost as well as all 10^6, at a fraction of the cost.
 */
const SUBSET_TARGET = 16384;

/**
 * Tie tolerance as in referenceRisk's default, 1e-9 * max(1, |shift|, mean |d|), without the mean
 * |d| term: at any n_B that passes, the α point, and with it the mean |d|, is already below
 * |shift|, so the term cannot change the answer and leaving it out saves a pass.
 */
const RELATIVE_TOLERANCE = 1e-9;

/**
 * The smallest after-window n_B at which a real shift of the given size would be judged credible
 * against the history's reference distribution at riskLevel.
 *
 * Cost: one O(N) prefix-sum pass, then O(log n_B) cheap probes on a strided subset and a few O(M)
 * counting passes over the full set. Scanning every n_B with its own O(N) reference distribution
 * would cost O(N · n_B) and take seconds on 10^6 samples.
 *
 * Search:
 * 1. Exponential then binary search over n_B on the strided subset. The α point of the differences
 *    falls roughly monotonically as n_B grows (the after-mean averages more samples), so this finds
 *    the boundary in O(log n_B) probes.
 * 2. Confirm with the full set of differences, then walk (galloping, then binary search) to the
 *    nearest n_B that passes on the full set while n_B - 1 fails. This corrects both the subset's
 *    sampling noise and small non-monotone wiggles near the boundary; the answer is exact for the
 *    full set in that neighbourhood, though with a strongly non-monotone history (drift, cycles) a
 *    smaller, isolated passing n_B far from the boundary could exist.
 * The full-set check counts instead of selecting: "α point beyond s" is, by the quantile convention
 * (select.ts), the same as "at most k differences at or beyond s", one pass with no copy.
 */
export function samplesNeeded(input: SamplesNeededInput): SamplesNeeded {
  const { history, nBefore, shift, direction, riskLevel, nAfterNow, maxNAfter } = input;
  requireWholeNumber('nBefore', nBefore, 1);
  requireDirection(direction);
  requireRiskLevel(riskLevel);
  requireWholeNumber('nAfterNow', nAfterNow, 0);
  if (maxNAfter !== undefined) requireWholeNumber('maxNAfter', maxNAfter, 1);
  if (!Number.isFinite(shift)) throw new RangeError(`shift must be a finite number, got ${shift}`);

  if (shift === 0) {
    return notReachable('A shift of zero cannot be told apart from the process noise.', 0);
  }
  if (direction === 'rise' && shift < 0) {
    return notReachable(`A rise needs a positive shift; got ${fmt(shift)}.`, 0);
  }
  if (direction === 'fall' && shift > 0) {
    return notReachable(`A fall needs a negative shift; got ${fmt(shift)}.`, 0);
  }

  const n = history.length;
  const minimumM = minimumReferenceSize(riskLevel);
  // Two limits on the after-window, with M = n - nBefore - n_B + 1 reference differences:
  // - M >= minimumM, or the risk level cannot be resolved at all;
  // - M >= nBefore + n_B: the window pair must slide through at least its own length of history.
  //   Beyond that the after-windows of the reference set mostly share the same samples, so the set
  //   no longer shows how much an after-mean varies and its α point drops spuriously: on 10^6
  //   i.i.d. normal samples with nBefore = 20 the upper 5 % point is within 2 % of normal theory up
  //   to n_B = 990 000 but about 20 % below it at n_B = 999 000 (measured in development), which
  //   would promise a detection that can never come (normal theory says a 0.3 sigma rise is beyond
  //   reach with nBefore = 20, whatever n_B).
  const bySize = n - nBefore + 1 - minimumM;
  const byOverlap = Math.floor((n + 1) / 2) - nBefore;
  const largestValid = Math.min(bySize, byOverlap);
  if (largestValid < 1) {
    return notReachable(
      `The history holds ${n} samples; with nBefore = ${nBefore} at least ` +
        `${Math.max(nBefore + minimumM, 2 * nBefore + 1)} are needed for even a 1-sample ` +
        `after-window to leave enough reference differences (at least ${minimumM} for a risk ` +
        `level of ${riskLevel}, and at least the length of the window pair).`,
      0,
    );
  }
  const cap = Math.min(maxNAfter ?? largestValid, largestValid);

  const probe = new Probe(
    prefixSums(history, roughCentre(history)),
    nBefore,
    direction,
    shift,
    riskLevel,
  );

  // 1. Exponential search on the strided subset: 1, 2, 4, ... up to the cap.
  let lastFail = 0;
  let firstPass = 0;
  let estimateAtCap = Number.NaN;
  for (let nB = 1; ; nB = Math.min(2 * nB, cap)) {
    const passes = probe.estimatePasses(nB);
    if (nB === cap) estimateAtCap = probe.lastEstimate;
    if (passes) {
      firstPass = nB;
      break;
    }
    lastFail = nB;
    if (nB >= cap) break;
  }

  let candidate: number;
  if (firstPass === 0) {
    // The subset can miss a narrow pass at the cap through sampling noise: the full set decides.
    if (!probe.passes(cap)) return unreachableAtCap();
    candidate = cap;
  } else {
    let lo = lastFail;
    let hi = firstPass;
    while (hi - lo > 1) {
      const mid = lo + Math.floor((hi - lo) / 2);
      if (probe.estimatePasses(mid)) hi = mid;
      else lo = mid;
    }
    candidate = hi;
  }

  // 2. Confirm on the full set and move to the nearest boundary (pass at n_B, fail at n_B - 1).
  let lo: number;
  let hi: number;
  if (probe.passes(candidate)) {
    hi = candidate;
    lo = 0; // n_B = 0 cannot pass: no after-window.
    for (let step = 1; hi - step >= 1; step *= 2) {
      if (probe.passes(hi - step)) {
        hi -= step;
      } else {
        lo = hi - step;
        break;
      }
    }
  } else {
    lo = candidate;
    hi = 0;
    for (let step = 1; lo < cap; step *= 2) {
      const t = Math.min(lo + step, cap);
      if (probe.passes(t)) {
        hi = t;
        break;
      }
      lo = t;
    }
    if (hi === 0) {
      if (Number.isNaN(estimateAtCap)) {
        probe.estimatePasses(cap);
        estimateAtCap = probe.lastEstimate;
      }
      return unreachableAtCap();
    }
  }
  while (hi - lo > 1) {
    const mid = lo + Math.floor((hi - lo) / 2);
    if (probe.passes(mid)) hi = mid;
    else lo = mid;
  }

  if (hi <= nAfterNow) return { status: 'reached', nAfter: hi, more: 0 };
  return { status: 'reachable', nAfter: hi, more: hi - nAfterNow };

  function unreachableAtCap(): SamplesNeeded {
    const upTo = cap < largestValid ? `up to maxNAfter = ${cap} samples` : `up to ${cap} samples`;
    const beyond =
      cap < largestValid
        ? ''
        : bySize <= byOverlap
          ? ` A longer one would leave fewer than the ${minimumM} reference differences that a ` +
            `risk level of ${riskLevel} needs in ${n} samples of history.`
          : ` A longer one would leave the history (${n} samples) shorter than two window ` +
            `pairs, too little to show how much an after-window mean varies.`;
    const point = direction === 'fall' ? 'lower' : 'upper';
    const of = direction === 'either' ? 'the size of the differences' : 'the differences';
    return notReachable(
      `No after-window ${upTo} makes a shift of ${fmt(shift)} credible at risk level ` +
        `${riskLevel}.${beyond} At ${cap} samples the history's own ${point} ${riskLevel} point ` +
        `of ${of} is still about ${fmt(estimateAtCap)}. A longer before-window (nBefore), or ` +
        `more history, lets smaller shifts be resolved.`,
      cap,
    );
  }
}

/**
 * Prefix sums P[i] = sum of (history[k] - centre) for k < i, so any window sum is one subtraction
 * and each probe of an after-window size costs O(1) per window position.
 *
 * Precision: centred on a rough mean (roughCentre) so the prefix stays near zero for an in-control
 * tag, and accumulated with compensation (Knuth's TwoSum), storing the compensated value, so the
 * error of each P[i] is one rounding at its own size instead of a million accumulated ones. For a
 * strongly drifting tag the prefix can still grow large, which blurs differences by ~1e-16 of it:
 * harmless here, where they are only compared with a shift of practical size.
 *
 * The N + 1 doubles live in a kept scratch buffer (see scratch.ts).
 */
function prefixSums(history: ArrayLike<number>, centre: number): Float64Array {
  const n = history.length;
  const p = scratch('prefix-sums', n + 1);
  p[0] = 0;
  let sum = 0;
  let c = 0;
  for (let i = 0; i < n; i += 1) {
    const y = (history[i] ?? Number.NaN) - centre;
    const t = sum + y;
    const v = t - sum;
    c += sum - (t - v) + (y - v);
    sum = t;
    p[i + 1] = sum + c;
  }
  if (!Number.isFinite(sum + c)) throw nonFiniteHistory(history);
  return p;
}

/** d_j from the prefix sums (invB = 1 / nBefore, invA = 1 / nAfter). */
function differenceAt(
  p: Float64Array,
  j: number,
  nBefore: number,
  nAfter: number,
  invB: number,
  invA: number,
): number {
  const a = p[j + nBefore] ?? Number.NaN;
  return ((p[j + nBefore + nAfter] ?? Number.NaN) - a) * invA - (a - (p[j] ?? Number.NaN)) * invB;
}

/**
 * Evaluates, for one after-window size, whether the shift lies beyond the history's α point:
 * roughly from a strided subset (with a quickselect quantile) or exactly from all differences.
 */
class Probe {
  /** The α point found by the last estimatePasses call (for messages). */
  lastEstimate = Number.NaN;
  private readonly scratch: Float64Array;
  private readonly bound: number;

  constructor(
    private readonly prefix: Float64Array,
    private readonly nBefore: number,
    private readonly direction: Direction,
    shift: number,
    private readonly riskLevel: number,
  ) {
    const largestM = prefix.length - 1 - nBefore;
    // A stride of floor(M / SUBSET_TARGET) leaves fewer than 2 * SUBSET_TARGET positions.
    this.scratch = new Float64Array(Math.max(0, Math.min(largestM, 2 * SUBSET_TARGET)));
    const tolerance = RELATIVE_TOLERANCE * Math.max(1, Math.abs(shift));
    // Ties count against the shift, as in referenceRisk: d within tolerance of s is "at or beyond".
    this.bound =
      direction === 'rise'
        ? shift - tolerance
        : direction === 'fall'
          ? shift + tolerance
          : Math.abs(shift) - tolerance;
  }

  private m(nAfter: number): number {
    return this.prefix.length - this.nBefore - nAfter;
  }

  estimatePasses(nAfter: number): boolean {
    const m = this.m(nAfter);
    const stride = Math.max(1, Math.floor(m / SUBSET_TARGET));
    const count = Math.ceil(m / stride);
    const values = this.scratch.subarray(0, count);
    const { prefix, nBefore, direction } = this;
    const invB = 1 / nBefore;
    const invA = 1 / nAfter;
    for (let i = 0, j = 0; i < count; i += 1, j += stride) {
      const d = differenceAt(prefix, j, nBefore, nAfter, invB, invA);
      values[i] = direction === 'either' ? Math.abs(d) : d;
    }
    if (direction === 'fall') {
      this.lastEstimate = lowerQuantile(values, this.riskLevel);
      return this.lastEstimate > this.bound;
    }
    this.lastEstimate = upperQuantile(values, this.riskLevel);
    return this.lastEstimate < this.bound;
  }

  /**
   * Exact test on all M differences. By the quantile convention, "α point beyond the shift" is "at
   * most k = allowedExceedances(M, α) differences at or beyond it", so one counting pass that stops
   * as soon as k is exceeded replaces copying and selecting.
   */
  passes(nAfter: number): boolean {
    const m = this.m(nAfter);
    const k = allowedExceedances(m, this.riskLevel);
    const { prefix, nBefore, direction, bound } = this;
    const invB = 1 / nBefore;
    const invA = 1 / nAfter;
    let beyond = 0;
    for (let j = 0; j < m; j += 1) {
      const d = differenceAt(prefix, j, nBefore, nAfter, invB, invA);
      const isBeyond =
        direction === 'rise'
          ? d >= bound
          : direction === 'fall'
            ? d <= bound
            : Math.abs(d) >= bound;
      if (isBeyond) {
        beyond += 1;
        if (beyond > k) return false;
      }
    }
    return true;
  }
}

function notReachable(reason: string, largestNAfterTried: number): SamplesNeeded {
  return { status: 'not-reachable', reason, largestNAfterTried };
}

function fmt(x: number): string {
  return Number.isFinite(x) ? String(Number(x.toPrecision(4))) : String(x);
}
