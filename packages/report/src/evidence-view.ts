/**
 * The evidence as it comes back from the store: the analyser saved @trueshift/stats Evidence as
 * JSON, where NaN and infinities became null and an older analyser may have left fields out. This
 * reads it field by field so a figure or a table row can say "not known" instead of crashing.
 */

import { isVerdict } from '@trueshift/stats';
import type { Verdict } from '@trueshift/stats';

export type DirectionText = 'rise' | 'fall' | 'either';

export interface WindowView {
  n: number;
  mean: number | null;
  sd: number | null;
}

export interface WelchView {
  t: number | null;
  df: number | null;
  pTwoSided: number | null;
  pRise: number | null;
  pFall: number | null;
  confidence: number | null;
  ciLower: number | null;
  ciUpper: number | null;
  effectiveBefore: number | null;
  effectiveAfter: number | null;
}

export interface ProjectionView {
  status: 'reached' | 'reachable' | 'not-reachable';
  nAfter: number | null;
  more: number | null;
  reason: string | null;
}

export interface EvidenceView {
  direction: DirectionText;
  riskLevel: number;
  nHistory: number;
  nBefore: number;
  nAfter: number;
  nAfterUnused: number;
  before: WindowView;
  after: WindowView;
  observedShift: number | null;
  reference: {
    status: 'ok' | 'not-enough-history';
    m: number;
    minimumM: number;
    countAtLeast: number | null;
    risk: number | null;
    riskRise: number | null;
    riskFall: number | null;
    riskEither: number | null;
  };
  welch: WelchView | null;
  welchEffective: WelchView | null;
  autocorrelation: { r1: number | null; limit: number | null; flagged: boolean; note: string };
  baseline: { mean: number | null; sigma: number | null; sigmaMethod: string };
  cusum: {
    k: number | null;
    h: number | null;
    upper: number | null;
    lower: number | null;
    signalAt: number | null;
    changeSide: 'upper' | 'lower' | null;
    changePoint: number | null;
    estimatedMean: number | null;
  };
  ewma: {
    lambda: number | null;
    L: number | null;
    z: number | null;
    lower: number | null;
    upper: number | null;
    signalAt: number | null;
  };
  samplesNeeded: ProjectionView | null;
  samplesNeededForSmallest: ProjectionView | null;
  verdict: Verdict;
  verdictText: string;
}

type Json = Record<string, unknown>;

function isRecord(value: unknown): value is Json {
  return typeof value === 'object' && value !== null && !Array.isArray(value);
}

function record(value: unknown): Json {
  return isRecord(value) ? value : {};
}

function num(obj: Json, key: string): number | null {
  const value = obj[key];
  return typeof value === 'number' && Number.isFinite(value) ? value : null;
}

function text(obj: Json, key: string): string | null {
  const value = obj[key];
  return typeof value === 'string' ? value : null;
}

function direction(value: unknown): DirectionText {
  return value === 'rise' || value === 'fall' ? value : 'either';
}

function windowView(value: unknown): WindowView {
  const obj = record(value);
  return { n: num(obj, 'n') ?? 0, mean: num(obj, 'mean'), sd: num(obj, 'sd') };
}

function welchView(value: unknown): WelchView | null {
  if (!isRecord(value)) return null;
  const ci = record(value.ci);
  const sizes = record(value.effectiveSizes);
  return {
    t: num(value, 't'),
    df: num(value, 'df'),
    pTwoSided: num(value, 'pTwoSided'),
    pRise: num(value, 'pRise'),
    pFall: num(value, 'pFall'),
    confidence: num(value, 'confidence'),
    ciLower: num(ci, 'lower'),
    ciUpper: num(ci, 'upper'),
    effectiveBefore: num(sizes, 'before'),
    effectiveAfter: num(sizes, 'after'),
  };
}

function projectionView(value: unknown): ProjectionView | null {
  if (!isRecord(value)) return null;
  const status = value.status;
  if (status !== 'reached' && status !== 'reachable' && status !== 'not-reachable') return null;
  return {
    status,
    nAfter: num(value, 'nAfter'),
    more: num(value, 'more'),
    reason: text(value, 'reason'),
  };
}

function side(value: unknown): 'upper' | 'lower' | null {
  return value === 'upper' || value === 'lower' ? value : null;
}

/**
 * The evidence inside a snapshot body. The analyser wraps it as { evidence, settings, ... }; a bare
 * Evidence object is read too. Null when there is none (the history was too short to judge).
 */
export function readEvidence(body: unknown): EvidenceView | null {
  const outer = record(body);
  const inner = isRecord(outer.evidence) ? outer.evidence : outer;
  const verdict = inner.verdict;
  const riskLevel = num(inner, 'riskLevel');
  if (!isVerdict(verdict) || riskLevel === null || !isRecord(inner.reference)) return null;
  const reference = inner.reference;
  const autocorrelation = record(inner.autocorrelation);
  const baseline = record(inner.baseline);
  const cusum = record(inner.cusum);
  const change = record(cusum.change);
  const ewma = record(inner.ewma);
  return {
    direction: direction(inner.direction),
    riskLevel,
    nHistory: num(inner, 'nHistory') ?? 0,
    nBefore: num(inner, 'nBefore') ?? 0,
    nAfter: num(inner, 'nAfter') ?? 0,
    nAfterUnused: num(inner, 'nAfterUnused') ?? 0,
    before: windowView(inner.before),
    after: windowView(inner.after),
    observedShift: num(inner, 'observedShift'),
    reference: {
      status: reference.status === 'ok' ? 'ok' : 'not-enough-history',
      m: num(reference, 'm') ?? 0,
      minimumM: num(reference, 'minimumM') ?? 0,
      countAtLeast: num(reference, 'countAtLeast'),
      risk: num(reference, 'risk'),
      riskRise: num(reference, 'riskRise'),
      riskFall: num(reference, 'riskFall'),
      riskEither: num(reference, 'riskEither'),
    },
    welch: welchView(inner.welch),
    welchEffective: welchView(inner.welchEffective),
    autocorrelation: {
      r1: num(autocorrelation, 'r1'),
      limit: num(autocorrelation, 'limit'),
      flagged: autocorrelation.flagged === true,
      note: text(autocorrelation, 'note') ?? '',
    },
    baseline: {
      mean: num(baseline, 'mean'),
      sigma: num(baseline, 'sigma'),
      sigmaMethod: text(baseline, 'sigmaMethod') ?? 'median-moving-range',
    },
    cusum: {
      k: num(cusum, 'k'),
      h: num(cusum, 'h'),
      upper: num(cusum, 'upper'),
      lower: num(cusum, 'lower'),
      signalAt: num(cusum, 'signalAt'),
      changeSide: side(change.side),
      changePoint: num(change, 'changePoint'),
      estimatedMean: num(change, 'estimatedMean'),
    },
    ewma: {
      lambda: num(ewma, 'lambda'),
      L: num(ewma, 'L'),
      z: num(ewma, 'z'),
      lower: num(ewma, 'lower'),
      upper: num(ewma, 'upper'),
      signalAt: num(ewma, 'signalAt'),
    },
    samplesNeeded: projectionView(inner.samplesNeeded),
    samplesNeededForSmallest: projectionView(inner.samplesNeededForSmallest),
    verdict,
    verdictText: text(inner, 'verdictText') ?? '',
  };
}
