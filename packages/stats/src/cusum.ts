/**
 * Tabular (decision-interval) CUSUM for a shift in the mean, upper and lower sums, after Page (1954)
 * in the form given by Montgomery, Introduction to Statistical Quality Control.
 *
 * The state is a plain object so a service can persist it with JSON.stringify and restore it with
 * JSON.parse; every update mutates it in place in O(1) and allocates nothing.
 */

export interface CusumSettings {
  /** In-control mean μ0, raw units. */
  target: number;
  /** In-control standard deviation of the plotted values (σ of the group mean for groups), raw units. */
  sigma: number;
  /** Reference value (slack) in σ units, usually half the shift to detect (0.5 for a 1σ shift). */
  k: number;
  /** Decision interval in σ units. */
  h: number;
  /** Head start (fast initial response) in σ units, e.g. h/2; default 0. Also used after a reset. */
  headStart?: number;
}

export interface CusumState {
  settings: CusumSettings;
  /** Samples used (non-finite samples are skipped and not counted). Not cleared by a reset. */
  n: number;
  /** C+ in σ units. */
  upper: number;
  /** C− in σ units, the sum of downward deviations, kept ≥ 0. */
  lower: number;
  /** N+: samples since C+ was last zero. */
  upperRunLength: number;
  /** N−: samples since C− was last zero. */
  lowerRunLength: number;
  /** Raw-unit sum of the samples since C+ was last zero (their mean is the run's average level). */
  upperSum: number;
  /** Raw-unit sum of the samples since C− was last zero. */
  lowerSum: number;
  /** 1-based sample index (on the n axis) of the first upper signal since creation or reset. */
  upperSignalAt: number | null;
  /** 1-based sample index of the first lower signal since creation or reset. */
  lowerSignalAt: number | null;
}

export type CusumSide = 'upper' | 'lower';

export interface CusumChange {
  side: CusumSide;
  /**
   * 1-based index of the last sample at which the sum was zero; the change is estimated right after
   * it. 0 means the sum has not been zero since the start (or reset), so the change predates it.
   */
  changePoint: number;
  /** Estimated new process mean, raw units. */
  estimatedMean: number;
}

function checkSettings(settings: CusumSettings): void {
  const { target, sigma, k, h } = settings;
  const headStart = settings.headStart ?? 0;
  if (!Number.isFinite(target)) {
    throw new RangeError(`CUSUM target must be a finite number, got ${target}.`);
  }
  if (!(Number.isFinite(sigma) && sigma > 0)) {
    throw new RangeError(`CUSUM sigma must be a finite number > 0, got ${sigma}.`);
  }
  if (!(Number.isFinite(k) && k >= 0)) {
    throw new RangeError(`CUSUM k must be a finite number >= 0 (sigma units), got ${k}.`);
  }
  if (!(Number.isFinite(h) && h > 0)) {
    throw new RangeError(`CUSUM h must be a finite number > 0 (sigma units), got ${h}.`);
  }
  // A head start at or above h would signal before any data arrive.
  if (!(Number.isFinite(headStart) && headStart >= 0 && headStart < h)) {
    throw new RangeError(`CUSUM headStart must be >= 0 and < h (${h}), got ${headStart}.`);
  }
}

export function createCusum(settings: CusumSettings): CusumState {
  checkSettings(settings);
  const headStart = settings.headStart ?? 0;
  // Copy the settings so later edits to the caller's object cannot change a running chart.
  const own: CusumSettings = {
    target: settings.target,
    sigma: settings.sigma,
    k: settings.k,
    h: settings.h,
  };
  if (settings.headStart !== undefined) own.headStart = settings.headStart;
  return {
    settings: own,
    n: 0,
    upper: headStart,
    lower: headStart,
    upperRunLength: 0,
    lowerRunLength: 0,
    upperSum: 0,
    lowerSum: 0,
    upperSignalAt: null,
    lowerSignalAt: null,
  };
}

export function cusumUpdate(state: CusumState, x: number): CusumState {
  // A missing or broken reading must not turn the sums into NaN for ever after.
  if (!Number.isFinite(x)) return state;
  const { target, sigma, k, h } = state.settings;
  const z = (x - target) / sigma;
  state.n += 1;

  const upper = state.upper + z - k;
  if (upper > 0) {
    state.upper = upper;
    state.upperRunLength += 1;
    state.upperSum += x;
  } else {
    state.upper = 0;
    state.upperRunLength = 0;
    state.upperSum = 0;
  }

  const lower = state.lower - z - k;
  if (lower > 0) {
    state.lower = lower;
    state.lowerRunLength += 1;
    state.lowerSum += x;
  } else {
    state.lower = 0;
    state.lowerRunLength = 0;
    state.lowerSum = 0;
  }

  if (state.upperSignalAt === null && state.upper > h) state.upperSignalAt = state.n;
  if (state.lowerSignalAt === null && state.lower > h) state.lowerSignalAt = state.n;
  return state;
}

export function cusumSignal(state: CusumState): CusumSide | 'both' | null {
  const { h } = state.settings;
  const up = state.upper > h;
  const down = state.lower > h;
  if (up && down) return 'both';
  if (up) return 'upper';
  if (down) return 'lower';
  return null;
}

function chooseSide(state: CusumState): CusumSide {
  const current = cusumSignal(state);
  if (current === 'upper' || current === 'lower') return current;
  if (current === null) {
    // After a signal the sum may have fallen back inside; the side that signalled still owns the
    // estimate until the chart is reset.
    const up = state.upperSignalAt;
    const down = state.lowerSignalAt;
    if (up !== null && (down === null || up <= down)) return 'upper';
    if (down !== null) return 'lower';
  }
  return state.upper >= state.lower ? 'upper' : 'lower';
}

export function cusumChange(state: CusumState): CusumChange | null {
  const side = chooseSide(state);
  const { target, sigma, k } = state.settings;
  const runLength = side === 'upper' ? state.upperRunLength : state.lowerRunLength;
  // With no sample since the sum was last zero there is no evidence of a change on this side.
  if (runLength === 0) return null;
  const changePoint = state.n - runLength;
  // Montgomery's estimate: mu0 + K + C+/N+ (upper) or mu0 - K - C-/N- (lower), raw units.
  const estimatedMean =
    side === 'upper'
      ? target + k * sigma + (state.upper * sigma) / runLength
      : target - k * sigma - (state.lower * sigma) / runLength;
  return { side, changePoint, estimatedMean };
}

/**
 * Restarts both sums at the head start, so a chart restarted after an adjustment keeps its fast
 * initial response; n keeps counting so indices stay on the caller's sample axis.
 */
export function cusumReset(state: CusumState): CusumState {
  const headStart = state.settings.headStart ?? 0;
  state.upper = headStart;
  state.lower = headStart;
  state.upperRunLength = 0;
  state.lowerRunLength = 0;
  state.upperSum = 0;
  state.lowerSum = 0;
  state.upperSignalAt = null;
  state.lowerSignalAt = null;
  return state;
}
