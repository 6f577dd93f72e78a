export { buildFigures, referenceFigure, questionOf, verdictTitle, MAX_DOTS } from './figures.js';
export type { FigureInput, Figures, MeanSegment, ReferenceFigure } from './figures.js';
export { readEvidence } from './evidence-view.js';
export type { EvidenceView, ProjectionView, WelchView, WindowView } from './evidence-view.js';
export { overviewRows, evidenceKey, TAG_STATE_TEXT, TAG_STATE_RANK } from './overview.js';
export type {
  OverviewAlertIn,
  OverviewEvidenceIn,
  OverviewMarkIn,
  OverviewRow,
  OverviewTagIn,
  TagState,
} from './overview.js';
export {
  renderPlot,
  niceTicks,
  timeTicks,
  padRange,
  jitter,
  runChartSvg,
  referenceSvg,
  riskPathSvg,
  comparisonSvg,
  cusumSvg,
  ewmaSvg,
  PALETTE,
} from './svg.js';
export type { AxisSpec, Layer, LegendEntry, PlotSpec } from './svg.js';
export { buildDecisionReport } from './decision-report.js';
export type { ReportOptions } from './decision-report.js';
export {
  escapeHtml,
  formatNumber,
  formatSigned,
  formatPercent,
  formatP,
  formatTime,
  withUnit,
} from './format.js';
