export { ANALYSER_DEFAULTS, resolveTagSettings, formatPeriod, basisOf } from './settings.js';
export type { ResolvedTagSettings, Basis } from './settings.js';
export {
  createPeriods,
  periodFold,
  periodClose,
  periodMeans,
  periodStartOf,
} from './period-means.js';
export type { PeriodState, ClosedPeriod, PeriodFold } from './period-means.js';
export { robustBaseline } from './baseline.js';
export type { Baseline, BaselineSigmaMethod } from './baseline.js';
export { chartDesign, chartDesignKey } from './chart-design.js';
export type { ChartDesign } from './chart-design.js';
export { createWatch, watchUpdate, watchRebaseline, watchConfigure } from './watch.js';
export type { WatchSettings, WatchState, UnmarkedShift } from './watch.js';
export {
  createDataQuality,
  dataQualitySample,
  dataQualityCheck,
  usualInterval,
  outOfRangeEvents,
} from './data-quality.js';
export type {
  DataQualitySettings,
  DataQualityState,
  DataQualityEvent,
  OutOfRangeEvent,
} from './data-quality.js';
export {
  markSettings,
  createMarkTagState,
  markAddSample,
  markClosePeriod,
  markRebuildAfter,
  settlingWindows,
  inControlHistory,
  evaluateMark,
  evaluateMarkCatchUp,
} from './mark-evaluation.js';
export type {
  MarkSettings,
  MarkTagState,
  MarkSampleResult,
  MarkEvaluation,
  SettledReason,
  SettlingWindow,
} from './mark-evaluation.js';
export {
  dedupeKeys,
  credibleShiftAlert,
  unmarkedShiftAlert,
  dataQualityAlert,
  outOfRangeAlert,
} from './alerts.js';
