import { autocorrelationCheck, effectiveSampleSize } from './autocorrelation.js';
import type { AutocorrelationCheck } from './autocorrelation.js';
import { createCusum, cusumChange, cusumSignal, cusumUpdate } from './cusum.js';
import type { CusumChange, CusumSide } from './cusum.js';
import { mean, sampleStandardDeviation } from './descriptive.js';
import { createEwma, ewmaSignal, ewmaUpdate } from './ewma.js';
import {
  minimumReferenceSize,
  observedDifference,
  referenceRisk,
  windowDifferences,
} from './reference-distribution.js';
import type { Direction, ReferenceRisk } from './reference-distribution.js';
import { samplesNeeded } from './samples-needed.js';
import { scratch } from './scratch.js';
import type { SamplesNeeded } from './samples-needed.js';
import { sigmaFromAverageMovingRange, sigmaFromMedianMovingRange } from './sigma.js';
import { welchTest } from './welch.js';
import type { WelchResult } from './welch.js';

export type SigmaMethod = 'median-moving-range' | 'average-moving-range' | 'sample-sd';

/** The verdict on a change, in plain words of the project's own. */
export type Verdict =
  | 'not-enough-history'
  | 'still-gathering'
  | 'credible-rise'
  | 'credible-fall'
  | 'credible-but-small'
  | 'no-credible-shift';

/** Every verdict there is, keyed so that a new one fails to compile until it is listed here. */
const VERDICTS: Record<Verdict, true> = {
  'not-enough-history': true,
  'still-gathering': true,
  'credible-rise': true,
  'credible-fall': true,
  'credible-but-small': true,
  'no-credible-shift': true,
};

/** Whether a stored or received text is one of the verdicts. */
export function isVerdict(value: unknown): value is Verdict {
  return typeof value === 'string' && Object.hasOwn(VERDICTS, value);
}

export interface EvidenceInput {
  /** In-control samples before the change, oldest first. */
  history: ArrayLike<number>;
  /** Samples since the change, oldest first. */
  after: ArrayLike<number>;
  direction: Direction;
  /** The risk of being wrong the user accepts, e.g. 0.05. */
  riskLevel: number;
  /** Before-window n_A; by default as long as the after-window, at least 10 (see defaultBeforeWindow). */
  nBefore?: number;
  /** Largest after-window n_B; samples beyond it are not used. */
  nAfterCap?: number;
  /** The smallest shift worth having (a positive size in the tag's unit). */
  smallestShift?: number;
  sigmaMethod?: SigmaMethod;
  /** Confidence of the shift's interval; 1 − riskLevel by default. */
  confidence?: number;
  /** CUSUM reference value k and decision interval h, in sigma units. */
  cusum?: { k: number; h: number; headStart?: number };
  /** EWMA weight lambda and limit width L in sigma units. */
  ewma?: { lambda: number; L: number };
}

export interface WindowSummary {
  n: number;
  mean: number;
  sd: number;
}

export interface ChartSummary {
  signal: CusumSide | 'both' | null;
  /** 1-based after-sample of the first signal, or null. */
  signalAt: number | null;
}

export interface Evidence {
  direction: Direction;
  riskLevel: number;
  nHistory: number;
  nBefore: number;
  nAfter: number;
  /** After-samples left out because the after-window is capped. */
  nAfterUnused: number;
  before: WindowSummary;
  after: WindowSummary;
  observedShift: number;
  reference: ReferenceRisk;
  welch: WelchResult | null;
  /** Welch's test again with effective sample sizes, when the history shows autocorrelation. */
  welchEffective: WelchResult | null;
  autocorrelation: AutocorrelationCheck;
  baseline: {
    mean: number;
    sigma: number;
    sigmaMethod: SigmaMethod;
    sigmaAverageMovingRange: number;
    sigmaMedianMovingRange: number;
    sampleSd: number;
  };
  cusum: ChartSummary & {
    k: number;
    h: number;
    upper: number;
    lower: number;
    change: CusumChange | null;
  };
  ewma: ChartSummary & { lambda: number; L: number; z: number; lower: number; upper: number };
  /** For the shift seen so far. */
  samplesNeeded: SamplesNeeded;
  /** For the smallest shift worth having, when one is set. */
  samplesNeededForSmallest: SamplesNeeded | null;
  verdict: Verdict;
  verdictText: string;
}

/** Common practice: k = 0.5 sigma with h = 5 sigma (two-sided in-control ARL about 465). */
export const DEFAULT_CUSUM = { k: 0.5, h: 5 } as const;
/** Lucas & Saccucci (1990): lambda = 0.2 with L = 2.962 gives an in-control ARL of about 500. */
export const DEFAULT_EWMA = { lambda: 0.2, L: 2.962 } as const;

/**
 * Before-window by default: as long as the after-window (the reference distribution of Box, Hunter &
 * Hunter compares equal windows) but at least 10, and never so long that the reference set gets too
 * small to resolve the risk level.
 */
export function defaultBeforeWindow(nHistory: number, nAfter: number, riskLevel: number): number {
  const wanted = Math.max(10, nAfter);
  const largest = nHistory - nAfter + 1 - minimumReferenceSize(riskLevel);
  return Math.max(1, Math.min(wanted, largest, nHistory));
}

function summary(x: ArrayLike<number>): WindowSummary {
  return { n: x.length, mean: mean(x), sd: sampleStandardDeviation(x) };
}

function tail(x: ArrayLike<number>, n: number): Float64Array {
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) out[i] = x[x.length - n + i] ?? Number.NaN;
  return out;
}

function head(x: ArrayLike<number>, n: number): Float64Array {
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) out[i] = x[i] ?? Number.NaN;
  return out;
}

function chooseSigma(method: SigmaMethod, amr: number, mmr: number, sd: number): number {
  switch (method) {
    case 'median-moving-range':
      return mmr;
    case 'average-moving-range':
      return amr;
    case 'sample-sd':
      return sd;
  }
}

function verdictOf(
  reference: ReferenceRisk,
  observed: number,
  smallestShift: number | undefined,
  projection: SamplesNeeded,
  projectionSmallest: SamplesNeeded | null,
  canGrow: boolean,
): Verdict {
  if (reference.status === 'not-enough-history') return 'not-enough-history';
  if (reference.credible) {
    if (smallestShift !== undefined && Math.abs(observed) < smallestShift) {
      return 'credible-but-small';
    }
    return observed >= 0 ? 'credible-rise' : 'credible-fall';
  }
  const stillPossible =
    projection.status === 'reachable' || projectionSmallest?.status === 'reachable';
  return canGrow && stillPossible ? 'still-gathering' : 'no-credible-shift';
}

function verdictText(
  verdict: Verdict,
  evidence: Omit<Evidence, 'verdict' | 'verdictText'>,
): string {
  const reference = evidence.reference;
  const risk = reference.status === 'ok' ? reference.risk : Number.NaN;
  // With no historical difference as large, the risk is only known to be below one in M.
  const riskText =
    reference.status === 'ok' && reference.countAtLeast === 0
      ? `less than ${((1 / reference.m) * 100).toPrecision(2)}%`
      : `${(risk * 100).toPrecision(2)}%`;
  const level = `${(evidence.riskLevel * 100).toPrecision(2)}%`;
  switch (verdict) {
    case 'not-enough-history':
      return `The history is too short to resolve a ${level} risk: ${evidence.reference.m} historical differences, ${evidence.reference.minimumM} needed.`;
    case 'still-gathering': {
      const more =
        evidence.samplesNeeded.status === 'reachable' ? evidence.samplesNeeded.more : null;
      return `Not credible yet (risk ${riskText} against ${level}); ${more === null ? 'more samples are' : `about ${more} more samples are`} needed before the evidence can decide.`;
    }
    case 'credible-rise':
    case 'credible-fall':
      return `The ${verdict === 'credible-rise' ? 'rise' : 'fall'} is credible: ${riskText} of the tag's own history shows a difference at least as large (risk level ${level}).`;
    case 'credible-but-small':
      return `The shift is credible (risk ${riskText}) but smaller than the smallest shift worth having.`;
    case 'no-credible-shift':
      return `No credible shift: ${riskText} of the tag's own history shows a difference at least as large, above the ${level} risk level, and more samples are not expected to change that.`;
  }
}

/**
 * The whole evidence on one change of one tag. O(N) in the history length: the reference set is built
 * with prefix sums and everything else is a few linear passes.
 */
export function computeEvidence(input: EvidenceInput): Evidence {
  const { history, direction, riskLevel } = input;
  if (!(riskLevel > 0 && riskLevel < 1)) throw new RangeError('riskLevel must lie in (0, 1).');
  if (history.length < 2) throw new RangeError('At least two history samples are needed.');
  if (input.after.length < 1)
    throw new RangeError('At least one sample after the change is needed.');
  const cap = input.nAfterCap ?? Number.POSITIVE_INFINITY;
  if (!(cap >= 1)) throw new RangeError('nAfterCap must be at least 1.');
  const nAfter = Math.min(input.after.length, Math.floor(cap));
  const after = head(input.after, nAfter);
  const nBefore = Math.min(
    input.nBefore ?? defaultBeforeWindow(history.length, nAfter, riskLevel),
    history.length,
  );
  if (!(nBefore >= 1) || !Number.isInteger(nBefore)) {
    throw new RangeError('nBefore must be a whole number of at least 1.');
  }
  const before = tail(history, nBefore);

  const observed = observedDifference(history, after, nBefore);
  const m = Math.max(0, history.length - nBefore - nAfter + 1);
  const differences = windowDifferences(history, nBefore, nAfter, scratch('window-differences', m));
  const reference = referenceRisk(differences, observed, { direction, riskLevel });

  const autocorrelation = autocorrelationCheck(history);
  const confidence = input.confidence ?? 1 - riskLevel;
  const welch = nBefore >= 2 && nAfter >= 2 ? welchTest(before, after, { confidence }) : null;
  const welchEffective =
    welch !== null && autocorrelation.flagged
      ? welchTest(before, after, {
          confidence,
          effectiveSizes: {
            before: effectiveSampleSize(nBefore, autocorrelation.r1),
            after: effectiveSampleSize(nAfter, autocorrelation.r1),
          },
        })
      : null;

  const sigmaMethod = input.sigmaMethod ?? 'median-moving-range';
  const sigmaAverageMovingRange = sigmaFromAverageMovingRange(history);
  const sigmaMedianMovingRange = sigmaFromMedianMovingRange(history);
  const sampleSd = sampleStandardDeviation(history);
  let sigma = chooseSigma(sigmaMethod, sigmaAverageMovingRange, sigmaMedianMovingRange, sampleSd);
  // A history with many repeated values has a median moving range of zero; fall back so the charts
  // still have a scale.
  if (!(sigma > 0)) sigma = sampleSd > 0 ? sampleSd : Number.EPSILON;
  const baselineMean = mean(history);

  const cusumSettings = input.cusum ?? DEFAULT_CUSUM;
  const cusum = createCusum({ target: baselineMean, sigma, ...cusumSettings });
  const ewmaSettings = input.ewma ?? DEFAULT_EWMA;
  const ewma = createEwma({ target: baselineMean, sigma, ...ewmaSettings });
  for (let i = 0; i < nAfter; i++) {
    const x = after[i] ?? Number.NaN;
    cusumUpdate(cusum, x);
    ewmaUpdate(ewma, x);
  }
  const cusumSignalAt = minDefined(cusum.upperSignalAt, cusum.lowerSignalAt);

  const projectionInput = {
    history,
    nBefore,
    direction,
    riskLevel,
    nAfterNow: nAfter,
    ...(input.nAfterCap === undefined ? {} : { maxNAfter: Math.floor(input.nAfterCap) }),
  };
  const projection = samplesNeeded({ ...projectionInput, shift: observed });
  const smallestShift = input.smallestShift;
  const projectionSmallest =
    smallestShift === undefined
      ? null
      : samplesNeeded({
          ...projectionInput,
          shift: direction === 'fall' ? -smallestShift : smallestShift,
        });

  const partial = {
    direction,
    riskLevel,
    nHistory: history.length,
    nBefore,
    nAfter,
    nAfterUnused: input.after.length - nAfter,
    before: summary(before),
    after: summary(after),
    observedShift: observed,
    reference,
    welch,
    welchEffective,
    autocorrelation,
    baseline: {
      mean: baselineMean,
      sigma,
      sigmaMethod,
      sigmaAverageMovingRange,
      sigmaMedianMovingRange,
      sampleSd,
    },
    cusum: {
      k: cusumSettings.k,
      h: cusumSettings.h,
      upper: cusum.upper,
      lower: cusum.lower,
      signal: cusumSignal(cusum),
      signalAt: cusumSignalAt,
      change: cusumSignalAt === null ? null : cusumChange(cusum),
    },
    ewma: {
      lambda: ewmaSettings.lambda,
      L: ewmaSettings.L,
      z: ewma.z,
      lower: ewma.lowerLimit,
      upper: ewma.upperLimit,
      signal: ewmaSignal(ewma),
      signalAt: ewma.signalAt,
    },
    samplesNeeded: projection,
    samplesNeededForSmallest: projectionSmallest,
  };
  const canGrow = nAfter < cap;
  const verdict = verdictOf(
    reference,
    observed,
    smallestShift,
    projection,
    projectionSmallest,
    canGrow,
  );
  return { ...partial, verdict, verdictText: verdictText(verdict, partial) };
}

function minDefined(a: number | null, b: number | null): number | null {
  if (a === null) return b;
  if (b === null) return a;
  return Math.min(a, b);
}
