import type { TagKind, TagSettings } from '@trueshift/store';

/** Every per-tag setting the analyser uses, with nothing left out. */
export interface ResolvedTagSettings {
  kind: TagKind;
  periodMs: number;
  riskLevel: number;
  nBefore: number;
  nAfterCap: number;
  smallestShift: number | null;
  inControlArl: number;
  cusumK: number;
  ewmaLambda: number;
  alertAfter: number;
  staleAfterIntervals: number;
  /** A tag is stuck when one value repeats more than this many times in a row. */
  stuckAfter: number;
  /** Values needed before the watch sets a baseline and starts. */
  minHistory: number;
  /** At most this many of the latest in-control values form a watch baseline. */
  baselineSize: number;
}

/**
 * The project's defaults. Sources and reasons:
 * - riskLevel 0.05: the conventional 5% level (common practice).
 * - nBefore 30: long enough for a stable before-mean, short enough to follow a slowly moving plant
 *   (a choice of this project; fixed at the mark so the before-mean does not move while the
 *   after-window grows).
 * - nAfterCap 100: a bound on the evaluation cost and on the time a mark stays open (a choice).
 * - inControlArl 500, cusumK 0.5, ewmaLambda 0.2: the usual design for detecting about a 1σ shift
 *   (common practice; λ = 0.2 with ARL 500 is the design tabulated by Lucas & Saccucci 1990).
 * - alertAfter 3: consecutive credible evaluations before an alert, so a verdict that flickers
 *   across the risk level does not open and close alerts (a choice).
 * - staleAfterIntervals 10, stuckAfter 20, minHistory 30, baselineSize 200: choices.
 */
export const ANALYSER_DEFAULTS: Readonly<ResolvedTagSettings> = Object.freeze({
  kind: 'batch',
  periodMs: 3_600_000,
  riskLevel: 0.05,
  nBefore: 30,
  nAfterCap: 100,
  smallestShift: null,
  inControlArl: 500,
  cusumK: 0.5,
  ewmaLambda: 0.2,
  alertAfter: 3,
  staleAfterIntervals: 10,
  stuckAfter: 20,
  minHistory: 30,
  baselineSize: 200,
});

/** The tag's own settings over the service's defaults over the project's. */
export function resolveTagSettings(
  tag: TagSettings | undefined,
  defaults: Partial<ResolvedTagSettings> = {},
): ResolvedTagSettings {
  const base: ResolvedTagSettings = { ...ANALYSER_DEFAULTS, ...defaults };
  const own = tag ?? {};
  const resolved: ResolvedTagSettings = {
    ...base,
    kind: own.kind ?? base.kind,
    periodMs: own.periodMs ?? base.periodMs,
    riskLevel: own.riskLevel ?? base.riskLevel,
    nBefore: own.nBefore ?? base.nBefore,
    nAfterCap: own.nAfterCap ?? base.nAfterCap,
    smallestShift: own.smallestShift ?? base.smallestShift,
    inControlArl: own.inControlArl ?? base.inControlArl,
    cusumK: own.cusumK ?? base.cusumK,
    ewmaLambda: own.ewmaLambda ?? base.ewmaLambda,
    alertAfter: own.alertAfter ?? base.alertAfter,
    staleAfterIntervals: own.staleAfterIntervals ?? base.staleAfterIntervals,
  };
  checkSettings(resolved);
  return resolved;
}

function checkSettings(s: ResolvedTagSettings): void {
  const problems: string[] = [];
  const whole = (name: string, value: number, min: number): void => {
    if (!Number.isInteger(value) || value < min)
      problems.push(`${name} must be a whole number >= ${min}, got ${value}`);
  };
  // Settings come from stored JSON, so the kind is checked as the string it may really be.
  const kind: string = s.kind;
  if (kind !== 'batch' && kind !== 'continuous')
    problems.push(`kind must be batch or continuous, got ${kind}`);
  whole('periodMs', s.periodMs, 1);
  if (!(s.riskLevel > 0 && s.riskLevel < 1))
    problems.push(`riskLevel must lie in (0, 1), got ${s.riskLevel}`);
  whole('nBefore', s.nBefore, 1);
  whole('nAfterCap', s.nAfterCap, 1);
  if (s.smallestShift !== null && !(s.smallestShift > 0 && Number.isFinite(s.smallestShift))) {
    problems.push(`smallestShift must be a positive number, got ${s.smallestShift}`);
  }
  if (!(s.inControlArl > 1 && s.inControlArl <= 1e9))
    problems.push(`inControlArl must lie in (1, 1e9], got ${s.inControlArl}`);
  if (!(s.cusumK >= 0 && Number.isFinite(s.cusumK)))
    problems.push(`cusumK must be >= 0, got ${s.cusumK}`);
  if (!(s.ewmaLambda > 0 && s.ewmaLambda <= 1))
    problems.push(`ewmaLambda must lie in (0, 1], got ${s.ewmaLambda}`);
  whole('alertAfter', s.alertAfter, 1);
  if (!(s.staleAfterIntervals > 0 && Number.isFinite(s.staleAfterIntervals))) {
    problems.push(`staleAfterIntervals must be a positive number, got ${s.staleAfterIntervals}`);
  }
  whole('stuckAfter', s.stuckAfter, 1);
  // The moving-range sigma needs at least two values, and a baseline cannot be smaller than the minimum.
  whole('minHistory', s.minHistory, 2);
  whole('baselineSize', s.baselineSize, s.minHistory);
  // Every problem at once, so a configuration is fixed in one go.
  if (problems.length > 0) throw new RangeError(`Analyser settings: ${problems.join('; ')}.`);
}

/** What one analysed value stands for; the evidence carries it. */
export type Basis = 'batch' | `period means of ${string}`;

const UNITS: readonly (readonly [number, string])[] = [
  [86_400_000, 'd'],
  [3_600_000, 'h'],
  [60_000, 'min'],
  [1000, 's'],
];

/** A period as people write it: 3600000 → "1 h", 900000 → "15 min". */
export function formatPeriod(periodMs: number): string {
  for (const [size, unit] of UNITS) {
    if (periodMs >= size && periodMs % size === 0) return `${periodMs / size} ${unit}`;
  }
  return `${periodMs} ms`;
}

export function basisOf(kind: TagKind, periodMs: number): Basis {
  return kind === 'batch' ? 'batch' : `period means of ${formatPeriod(periodMs)}`;
}
