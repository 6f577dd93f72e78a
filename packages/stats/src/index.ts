export {
  windowDifferences,
  observedDifference,
  minimumReferenceSize,
  referenceRisk,
  dotPlotData,
} from './reference-distribution.js';
export type {
  Direction,
  ReferenceRisk,
  ReferenceRiskOptions,
  DotPlotData,
} from './reference-distribution.js';
export { samplesNeeded } from './samples-needed.js';
export type { SamplesNeeded, SamplesNeededInput } from './samples-needed.js';
export { mean, sampleVariance, sampleStandardDeviation } from './descriptive.js';
export {
  logGamma,
  regularizedIncompleteBeta,
  normalCdf,
  normalQuantile,
  studentTCdf,
  studentTQuantile,
} from './distributions.js';
export { welchTest } from './welch.js';
export type { WelchResult } from './welch.js';
export {
  lag1Autocorrelation,
  effectiveSampleSize,
  autocorrelationCheck,
} from './autocorrelation.js';
export type { AutocorrelationCheck } from './autocorrelation.js';
export { sigmaFromAverageMovingRange, sigmaFromMedianMovingRange } from './sigma.js';
export { createCusum, cusumUpdate, cusumSignal, cusumChange, cusumReset } from './cusum.js';
export type { CusumSettings, CusumState, CusumSide, CusumChange } from './cusum.js';
export { createEwma, ewmaUpdate, ewmaSignal, ewmaAsymptoticLimits } from './ewma.js';
export type { EwmaSettings, EwmaState } from './ewma.js';
export { cusumArl, ewmaArl, solveCusumH, solveEwmaL } from './arl.js';
export {
  computeEvidence,
  defaultBeforeWindow,
  DEFAULT_CUSUM,
  DEFAULT_EWMA,
  isVerdict,
} from './evidence.js';
export type {
  Evidence,
  EvidenceInput,
  SigmaMethod,
  Verdict,
  WindowSummary,
  ChartSummary,
} from './evidence.js';
export { seededRandom, ar1Series } from './random.js';
export type { SeededRandom } from './random.js';
