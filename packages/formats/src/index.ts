export { parseHistoryCsv, locateChange, splitCsvLine, detectDelimiter } from './history-csv.js';
export type { HistoryTable, ParseHistoryOptions, SkippedRow, TimeKind } from './history-csv.js';
export { parseIsoTime, looksLikeIsoTime } from './iso-time.js';
export {
  checkSample,
  checkSampleAt,
  checkTime,
  tagNameProblem,
  buildRejection,
  cutRaw,
  rawOf,
  showValue,
  kindOf,
  RAW_LIMIT_BYTES,
  TAG_NAME_MAX_LENGTH,
  QUALITY_MAX,
} from './sample-checks.js';
export type {
  ParsedSamples,
  SampleCandidate,
  SampleCheck,
  SampleContext,
  TimeCheck,
} from './sample-checks.js';
export {
  matchTopic,
  tagFromTopic,
  topicFilterProblem,
  subscriptionProblems,
  parseMqttMessage,
} from './mqtt-payload.js';
export type { SubscriptionSpec, MqttMessageContext } from './mqtt-payload.js';
export { createDropCsvReader } from './drop-csv.js';
export type { DropCsvContext, DropCsvReader } from './drop-csv.js';
export { parseHttpSamples } from './http-samples.js';
export type { HttpSamplesContext } from './http-samples.js';
