/**
 * The watch without a mark: a two-sided tabular CUSUM and an EWMA per tag against the tag's
 * in-control level and robust sigma. A CUSUM past h is the sustained signal that raises an
 * unmarked shift: the CUSUM sum has to build up over several samples, where a single wild value
 * only spikes the EWMA. After a signal the watch re-learns the new level and then restarts both
 * charts there, so it also catches the tag returning. The level is re-learnt from minHistory values
 * counted from the estimated change point: the estimate at the signal rests on the few values of the
 * run (about 4 for a 2σ shift), and charts restarted on it would be off by about σ/2 and signal again
 * within tens of values.
 *
 * Autocorrelated tags (most plant tags: AR(1) with φ of 0.3–0.6) break the charts' assumption of
 * independent values: the moving-range sigma understates the process sigma and correlated deviations
 * pile up in the CUSUM, so false alarms come far more often than the design ARL. When the baseline
 * history's lag-1 autocorrelation is significantly positive (r1 > 2/√N), the watch charts the
 * one-step residuals of an AR(1) fit instead, e = (x_t − μ) − φ(x_{t−1} − μ) with φ = r1, against
 * target 0 (Alwan & Roberts 1988; Montgomery, Introduction to Statistical Quality Control, section
 * on autocorrelated process data; cited from memory). The residuals are close to independent, so the
 * design ARL holds again.
 *
 * The state is a plain object (JSON round-trips unchanged) updated in place in O(1) per value.
 */

import {
  autocorrelationCheck,
  createCusum,
  createEwma,
  cusumChange,
  cusumSignal,
  cusumUpdate,
  ewmaSignal,
  ewmaUpdate,
} from '@trueshift/stats';
import type { CusumState, EwmaState } from '@trueshift/stats';
import { robustBaseline } from './baseline.js';
import type { Baseline } from './baseline.js';

export interface WatchSettings {
  /** CUSUM reference value, σ units. */
  k: number;
  /** CUSUM decision interval, σ units. */
  h: number;
  lambda: number;
  L: number;
  /** Values needed before a baseline is set and the charts start. */
  minHistory: number;
  /** At most this many of the latest seed values form the baseline. */
  baselineSize: number;
  /**
   * false charts the raw values even on an autocorrelated tag (the behaviour before residual mode,
   * kept to compare against); absent or true chooses residual mode from the baseline history.
   */
  residuals?: boolean;
}

export interface WatchState {
  settings: WatchSettings;
  /** Values gathered while there is no baseline yet, or while the baseline is provisional. */
  learning: number[];
  /** After a shift: the values at the new level so far, summed, until there are minHistory. */
  relearn: { sum: number; count: number } | null;
  baseline: Baseline | null;
  cusum: CusumState | null;
  ewma: EwmaState | null;
  /** Values watched since the baseline was set (the charts' own n restarts at each reset). */
  n: number;
  /** Time of the first value of the current positive run of each CUSUM sum. */
  upperRunStart: number | null;
  lowerRunStart: number | null;
  /** Unmarked shifts raised so far; numbers them for their alerts. */
  shifts: number;
  lastTime: number | null;
  /**
   * AR(1) coefficient of the baseline history when the charts watch residuals, else null. Missing
   * in states persisted before residual mode, which means null.
   */
  phi?: number | null;
  /** Sigma of the baseline history's residuals, tag units; null outside residual mode. */
  residualSigma?: number | null;
  /** The last finite value folded in, the x_{t−1} of the next residual. */
  previous?: number | null;
}

export interface UnmarkedShift {
  kind: 'unmarked-shift';
  /** 1-based number of this shift on this tag. */
  number: number;
  side: 'rise' | 'fall';
  /** Estimated time of the first value at the new level (Montgomery's last-zero estimate). */
  changeTime: number;
  /** Time of the value that made the CUSUM cross h. */
  signalTime: number;
  /** Values at the new level up to the signal. */
  runLength: number;
  previousLevel: number;
  newLevel: number;
  sigma: number;
  cusum: { k: number; h: number; upper: number; lower: number };
  /** Whether the EWMA was outside its limits at the signal too. */
  ewmaAgrees: boolean;
  /**
   * Whether the charts watched AR(1) residuals (the tag's history was autocorrelated); then the
   * cusum sums are in residual σ units and newLevel is converted back to the tag's units.
   */
  residuals: boolean;
  /** The AR(1) coefficient used in residual mode, else null. */
  phi: number | null;
  /** Sigma of the residuals in residual mode, tag units, else null. */
  residualSigma: number | null;
}

export function createWatch(settings: WatchSettings, seed?: ArrayLike<number>): WatchState {
  checkWatchSettings(settings);
  const state: WatchState = {
    settings: { ...settings },
    learning: [],
    relearn: null,
    baseline: null,
    cusum: null,
    ewma: null,
    n: 0,
    upperRunStart: null,
    lowerRunStart: null,
    shifts: 0,
    lastTime: null,
    phi: null,
    residualSigma: null,
    previous: null,
  };
  if (seed !== undefined) {
    const from = Math.max(0, seed.length - settings.baselineSize);
    for (let i = from; i < seed.length; i++) {
      const x = seed[i] ?? Number.NaN;
      if (Number.isFinite(x)) state.learning.push(x);
    }
    state.previous = state.learning[state.learning.length - 1] ?? null;
    if (state.learning.length >= settings.minHistory) setBaselineFromLearning(state);
  }
  return state;
}

function checkWatchSettings(s: WatchSettings): void {
  if (!(Number.isInteger(s.minHistory) && s.minHistory >= 2)) {
    throw new RangeError(`minHistory must be a whole number >= 2, got ${s.minHistory}.`);
  }
  if (!(Number.isInteger(s.baselineSize) && s.baselineSize >= s.minHistory)) {
    throw new RangeError(
      `baselineSize must be a whole number >= minHistory, got ${s.baselineSize}.`,
    );
  }
  // The chart constructors check k, h, λ and L; trying them here fails early, before any data.
  createCusum({ target: 0, sigma: 1, k: s.k, h: s.h });
  createEwma({ target: 0, sigma: 1, lambda: s.lambda, L: s.L });
}

/** φ is clamped below 1: a near-unit-root fit would turn residuals into bare differences. */
const MAX_PHI = 0.95;

/**
 * Decides residual mode from a baseline history: φ and the residuals' sigma when r1 is above the
 * 2/√N band of independent values, else null. Only positive r1 counts: plant sampling makes
 * neighbours alike, and a negative r1 is more likely noise than a real alternating process. The
 * residual sigma is the median moving range of the residuals / 0.954 (robustBaseline), not their SD:
 * the residuals of an adequate fit are about independent, so the moving range is unbiased for them,
 * and a step or spike in the history shows as one or two wild residuals that the median ignores but
 * the SD would not.
 */
function residualFit(
  values: readonly number[],
  level: number,
): { phi: number; sigma: number } | null {
  const check = autocorrelationCheck(values);
  if (!(check.flagged && check.r1 > 0)) return null;
  const phi = Math.min(MAX_PHI, check.r1);
  const residuals: number[] = [];
  for (let i = 1; i < values.length; i++) {
    const x = values[i] ?? Number.NaN;
    const before = values[i - 1] ?? Number.NaN;
    residuals.push(x - level - phi * (before - level));
  }
  const fit = robustBaseline(residuals);
  return fit === null ? null : { phi, sigma: fit.sigma };
}

function setResidualMode(state: WatchState, values: readonly number[], level: number): void {
  const fit = state.settings.residuals === false ? null : residualFit(values, level);
  state.phi = fit?.phi ?? null;
  state.residualSigma = fit?.sigma ?? null;
}

/**
 * φ and the residual sigma while residual mode is on. Old states lack the fields (no residual
 * mode); settings with residuals: false switch it off even when a fit is held.
 */
function residualModeOf(state: WatchState): { phi: number; sigma: number } | null {
  const phi = state.phi ?? null;
  const sigma = state.residualSigma ?? null;
  if (phi === null || sigma === null || state.settings.residuals === false) return null;
  return { phi, sigma };
}

function startCharts(state: WatchState, level: number, sigma: number): void {
  const { k, h, lambda, L } = state.settings;
  const mode = residualModeOf(state);
  // In residual mode both charts watch residuals around 0, whatever the level.
  const target = mode === null ? level : 0;
  const chartSigma = mode === null ? sigma : mode.sigma;
  state.cusum = createCusum({ target, sigma: chartSigma, k, h });
  state.ewma = createEwma({ target, sigma: chartSigma, lambda, L });
  state.upperRunStart = null;
  state.lowerRunStart = null;
  state.relearn = null;
}

function setBaselineFromLearning(state: WatchState): void {
  const baseline = robustBaseline(state.learning);
  // A tag that has not varied at all has no scale yet; keep learning (bounded) until it does.
  if (baseline === null) {
    if (state.learning.length > state.settings.baselineSize) {
      state.learning.splice(0, state.learning.length - state.settings.baselineSize);
    }
    return;
  }
  state.baseline = baseline;
  setResidualMode(state, state.learning, baseline.mean);
  // A baseline from fewer than baselineSize values is provisional: the values stay, more join
  // them while the charts run, and the baseline is estimated once more from the full set (a sigma
  // from 30 moving ranges is off by about 15%, enough to halve or double the in-control ARL).
  if (state.learning.length >= state.settings.baselineSize) state.learning = [];
  startCharts(state, baseline.mean, baseline.sigma);
}

function refineBaseline(state: WatchState): void {
  const refined = robustBaseline(state.learning);
  const values = state.learning;
  state.learning = [];
  if (refined === null) return;
  state.baseline = refined;
  setResidualMode(state, values, refined.mean);
  startCharts(state, refined.mean, refined.sigma);
}

/**
 * Folds one in-control value in. Returns the unmarked shift when the CUSUM crosses h; the charts are
 * then already restarted at the new level. Non-finite values are ignored.
 */
export function watchUpdate(state: WatchState, t: number, x: number): UnmarkedShift | null {
  if (!Number.isFinite(x)) return null;
  state.lastTime = t;
  const previous = state.previous ?? null;
  state.previous = x;
  const { cusum, ewma, baseline, relearn } = state;
  if (relearn !== null && baseline !== null) {
    relearn.sum += x;
    relearn.count += 1;
    if (relearn.count >= state.settings.minHistory) {
      const level = relearn.sum / relearn.count;
      state.baseline = { ...baseline, mean: level };
      startCharts(state, level, baseline.sigma);
    }
    return null;
  }
  if (cusum === null || ewma === null || baseline === null) {
    state.learning.push(x);
    if (state.learning.length >= state.settings.minHistory) setBaselineFromLearning(state);
    return null;
  }
  state.n += 1;
  const mode = residualModeOf(state);
  // The one-step residual; without an x_{t−1} (cannot happen after a baseline) the deviation.
  const plotted =
    mode === null
      ? x
      : x - baseline.mean - mode.phi * ((previous ?? baseline.mean) - baseline.mean);
  cusumUpdate(cusum, plotted);
  ewmaUpdate(ewma, plotted);
  state.upperRunStart = cusum.upperRunLength === 0 ? null : (state.upperRunStart ?? t);
  state.lowerRunStart = cusum.lowerRunLength === 0 ? null : (state.lowerRunStart ?? t);
  const signal = cusumSignal(cusum);
  if (signal === null) {
    if (state.learning.length > 0) {
      state.learning.push(x);
      if (state.learning.length >= state.settings.baselineSize) refineBaseline(state);
    }
    return null;
  }
  // The values since the provisional baseline include the shift: they cannot refine it.
  state.learning = [];
  // Both sums past h at once needs a swing of 2h + 2k within one run; take the larger.
  const side = signal === 'both' ? (cusum.upper >= cusum.lower ? 'upper' : 'lower') : signal;
  const change = cusumChange(cusum);
  const runLength = side === 'upper' ? cusum.upperRunLength : cusum.lowerRunLength;
  const chartLevel =
    change?.side === side
      ? change.estimatedMean
      : (side === 'upper' ? cusum.upperSum : cusum.lowerSum) / Math.max(1, runLength);
  // A level step δ shows in the residuals as δ(1 − φ) after its first value, so the residual-scale
  // mean δ_e maps back to μ + δ_e / (1 − φ) in the tag's units.
  const newLevel = mode === null ? chartLevel : baseline.mean + chartLevel / (1 - mode.phi);
  const ewmaSide = ewmaSignal(ewma);
  state.shifts += 1;
  const event: UnmarkedShift = {
    kind: 'unmarked-shift',
    number: state.shifts,
    side: side === 'upper' ? 'rise' : 'fall',
    changeTime: (side === 'upper' ? state.upperRunStart : state.lowerRunStart) ?? t,
    signalTime: t,
    runLength,
    previousLevel: baseline.mean,
    newLevel,
    sigma: baseline.sigma,
    cusum: { k: cusum.settings.k, h: cusum.settings.h, upper: cusum.upper, lower: cusum.lower },
    ewmaAgrees: ewmaSide === side,
    residuals: mode !== null,
    phi: mode?.phi ?? null,
    residualSigma: mode?.sigma ?? null,
  };
  state.baseline = { ...baseline, mean: newLevel };
  state.cusum = null;
  state.ewma = null;
  state.upperRunStart = null;
  state.lowerRunStart = null;
  state.relearn = { sum: 0, count: 0 };
  return event;
}

/**
 * Moves the watch to a new in-control level, e.g. the level a mark settled at, and restarts the
 * charts; sigma stays unless given, since a change of level seldom changes the noise.
 */
export function watchRebaseline(state: WatchState, level: number, sigma?: number): void {
  if (!Number.isFinite(level)) throw new RangeError(`level must be finite, got ${level}.`);
  const current = state.baseline;
  const newSigma = sigma ?? current?.sigma;
  // Without a baseline yet there is no sigma to keep: the watch simply goes on learning.
  if (newSigma === undefined) return;
  // A new noise level scales the residuals' sigma alike; φ, a property of the process, stays.
  const residualSigma = state.residualSigma ?? null;
  if (sigma !== undefined && current !== null && residualSigma !== null) {
    state.residualSigma = (residualSigma * sigma) / current.sigma;
  }
  state.baseline = {
    mean: level,
    sigma: newSigma,
    sigmaMethod: current?.sigmaMethod ?? 'median-moving-range',
    n: current?.n ?? 0,
  };
  state.learning = [];
  startCharts(state, level, newSigma);
}

/** Applies changed chart settings; the charts restart at the current baseline when they differ. */
export function watchConfigure(state: WatchState, settings: WatchSettings): boolean {
  const s = state.settings;
  if (
    s.k === settings.k &&
    s.h === settings.h &&
    s.lambda === settings.lambda &&
    s.L === settings.L &&
    s.minHistory === settings.minHistory &&
    s.baselineSize === settings.baselineSize &&
    s.residuals === settings.residuals
  ) {
    return false;
  }
  checkWatchSettings(settings);
  state.settings = { ...settings };
  const baseline = state.baseline;
  // While re-learning a level the charts start when it is known, with the new settings.
  if (baseline !== null && state.relearn === null)
    startCharts(state, baseline.mean, baseline.sigma);
  return true;
}
