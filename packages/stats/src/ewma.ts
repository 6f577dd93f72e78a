/**
 * EWMA chart for the mean (Roberts 1959) with the exact time-varying limits
 * target ± L σ √(λ/(2−λ) · (1 − (1−λ)^{2n})), which widen towards the asymptotic limits.
 *
 * The state is a plain object (JSON round-trips unchanged); updates are O(1), in place, and
 * allocate nothing.
 */

export interface EwmaSettings {
  /** In-control mean, also the starting value of the EWMA. */
  target: number;
  /** In-control standard deviation of the plotted values, raw units. */
  sigma: number;
  /** Weight of the newest sample, 0 < λ ≤ 1. */
  lambda: number;
  /** Width of the limits in standard deviations of the EWMA statistic. */
  L: number;
}

export interface EwmaState {
  settings: EwmaSettings;
  /** Samples used (non-finite samples are skipped and not counted). */
  n: number;
  z: number;
  upperLimit: number;
  lowerLimit: number;
  /** 1-based index of the first sample whose EWMA fell outside its limits. */
  signalAt: number | null;
  /** (1−λ)^{2n}, carried so the limit update needs no power per sample. */
  decay: number;
}

function checkSettings(settings: EwmaSettings): void {
  const { target, sigma, lambda, L } = settings;
  if (!Number.isFinite(target)) {
    throw new RangeError(`EWMA target must be a finite number, got ${target}.`);
  }
  if (!(Number.isFinite(sigma) && sigma > 0)) {
    throw new RangeError(`EWMA sigma must be a finite number > 0, got ${sigma}.`);
  }
  if (!(Number.isFinite(lambda) && lambda > 0 && lambda <= 1)) {
    throw new RangeError(`EWMA lambda must be in (0, 1], got ${lambda}.`);
  }
  if (!(Number.isFinite(L) && L > 0)) {
    throw new RangeError(`EWMA L must be a finite number > 0, got ${L}.`);
  }
}

export function ewmaAsymptoticLimits(settings: EwmaSettings): { lower: number; upper: number } {
  checkSettings(settings);
  const { target, sigma, lambda, L } = settings;
  const half = L * sigma * Math.sqrt(lambda / (2 - lambda));
  return { lower: target - half, upper: target + half };
}

export function createEwma(settings: EwmaSettings): EwmaState {
  checkSettings(settings);
  const { target, sigma, lambda, L } = settings;
  return {
    // Copied so later edits to the caller's object cannot change a running chart.
    settings: { target, sigma, lambda, L },
    n: 0,
    z: target,
    // Before any sample the EWMA is exactly the target, so the band has zero width.
    upperLimit: target,
    lowerLimit: target,
    signalAt: null,
    decay: 1,
  };
}

export function ewmaUpdate(state: EwmaState, x: number): EwmaState {
  // A missing or broken reading must not turn the statistic into NaN for ever after.
  if (!Number.isFinite(x)) return state;
  const { target, sigma, lambda, L } = state.settings;
  const keep = 1 - lambda;
  state.n += 1;
  state.z = lambda * x + keep * state.z;
  state.decay *= keep * keep;
  const half = L * sigma * Math.sqrt((lambda / (2 - lambda)) * (1 - state.decay));
  state.upperLimit = target + half;
  state.lowerLimit = target - half;
  if (state.signalAt === null && (state.z > state.upperLimit || state.z < state.lowerLimit)) {
    state.signalAt = state.n;
  }
  return state;
}

export function ewmaSignal(state: EwmaState): 'upper' | 'lower' | null {
  if (state.z > state.upperLimit) return 'upper';
  if (state.z < state.lowerLimit) return 'lower';
  return null;
}
