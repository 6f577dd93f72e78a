import {
  mean,
  sampleStandardDeviation,
  sigmaFromAverageMovingRange,
  sigmaFromMedianMovingRange,
} from '@trueshift/stats';

export type BaselineSigmaMethod = 'median-moving-range' | 'average-moving-range' | 'sample-sd';

/** The in-control level and noise a chart measures against. */
export interface Baseline {
  mean: number;
  sigma: number;
  sigmaMethod: BaselineSigmaMethod;
  /** Values it was estimated from. */
  n: number;
}

/**
 * Mean and a robust sigma of in-control values. Sigma comes from the median moving range, which a
 * step or a few spikes in the history barely move; a tag that often repeats its value has a median
 * moving range of zero, so the average moving range and then the sample SD stand in. Null when
 * there are fewer than two finite values or the values never vary (no scale to chart against).
 */
export function robustBaseline(values: Iterable<number>): Baseline | null {
  const finite: number[] = [];
  for (const x of values) if (Number.isFinite(x)) finite.push(x);
  const n = finite.length;
  if (n < 2) return null;
  const level = mean(finite);
  const candidates: [BaselineSigmaMethod, () => number][] = [
    ['median-moving-range', () => sigmaFromMedianMovingRange(finite)],
    ['average-moving-range', () => sigmaFromAverageMovingRange(finite)],
    ['sample-sd', () => sampleStandardDeviation(finite)],
  ];
  for (const [sigmaMethod, estimate] of candidates) {
    const sigma = estimate();
    if (sigma > 0 && Number.isFinite(sigma)) return { mean: level, sigma, sigmaMethod, n };
  }
  return null;
}
