export {
  SparkplugDataType,
  sparkplugBDescriptor,
  PAYLOAD_TYPE_NAME,
} from './sparkplug-b-schema.js';
export type { SparkplugDataTypeName } from './sparkplug-b-schema.js';
export {
  decodeSparkplugPayload,
  encodeSparkplugPayload,
  int64ToNumber,
  int64ToText,
  metricToJson,
  payloadToJson,
} from './sparkplug-codec.js';
export type {
  DecodedMetric,
  DecodedPayload,
  DecodedPropertySet,
  DecodedPropertyValue,
  Int64,
  Int64Input,
  LongBits,
  MetricInput,
  PayloadInput,
  PropertyValueInput,
} from './sparkplug-codec.js';
export { parseSparkplugTopic, sparkplugIdProblem, SPARKPLUG_NAMESPACE } from './sparkplug-topic.js';
export type {
  SparkplugDeviceMessageType,
  SparkplugNodeMessageType,
  SparkplugTopic,
} from './sparkplug-topic.js';
export {
  createSparkplugSession,
  sparkplugOptionProblems,
  DEFAULT_TAG_TEMPLATE,
  DEFAULT_MAX_FUTURE_MS,
  DEFAULT_MAX_PAYLOAD_BYTES,
} from './sparkplug-session.js';
export type {
  SparkplugEvent,
  SparkplugMessageContext,
  SparkplugNodeSummary,
  SparkplugResult,
  SparkplugSession,
  SparkplugSessionOptions,
  SparkplugSkipped,
} from './sparkplug-session.js';
