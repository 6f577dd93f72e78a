import protobuf from 'protobufjs';
import { PAYLOAD_TYPE_NAME, sparkplugBDescriptor } from './sparkplug-b-schema.js';

/**
 * A 64-bit integer as protobufjs decodes it: a Long from the `long` package (two 32-bit halves),
 * or a plain number when protobufjs runs without `long`. Only the halves are read here, so the
 * `long` package need not be imported.
 */
export interface LongBits {
  low: number;
  high: number;
  unsigned?: boolean;
}

export type Int64 = LongBits | number;

export interface DecodedPropertyValue {
  type?: number;
  isNull?: boolean;
  intValue?: number;
  longValue?: Int64;
  floatValue?: number;
  doubleValue?: number;
  booleanValue?: boolean;
  stringValue?: string;
}

export interface DecodedPropertySet {
  keys: string[];
  values: DecodedPropertyValue[];
}

/**
 * One metric as decoded. Optional fields that were absent read as their protobuf defaults (0, '',
 * false), so presence is told with Object.hasOwn, never by the value.
 */
export interface DecodedMetric {
  name?: string;
  alias?: Int64;
  timestamp?: Int64;
  datatype?: number;
  isHistorical?: boolean;
  isTransient?: boolean;
  isNull?: boolean;
  properties?: DecodedPropertySet | null;
  intValue?: number;
  longValue?: Int64;
  floatValue?: number;
  doubleValue?: number;
  booleanValue?: boolean;
  stringValue?: string;
  bytesValue?: Uint8Array;
  datasetValue?: object;
  templateValue?: object;
  extensionValue?: object;
}

export interface DecodedPayload {
  timestamp?: Int64;
  metrics: DecodedMetric[];
  seq?: Int64;
  uuid?: string;
  body?: Uint8Array;
}

/**
 * 64-bit fields as the encoder takes them: a whole number, a bigint, or decimal text. Negative
 * values are written as their 64-bit two's complement.
 */
export type Int64Input = number | bigint | string;

export interface PropertyValueInput {
  type?: number;
  isNull?: boolean;
  intValue?: number;
  longValue?: Int64Input;
  floatValue?: number;
  doubleValue?: number;
  booleanValue?: boolean;
  stringValue?: string;
}

export interface MetricInput {
  name?: string;
  alias?: Int64Input;
  timestamp?: Int64Input;
  datatype?: number;
  isHistorical?: boolean;
  isTransient?: boolean;
  isNull?: boolean;
  properties?: { keys: string[]; values: PropertyValueInput[] };
  intValue?: number;
  longValue?: Int64Input;
  floatValue?: number;
  doubleValue?: number;
  booleanValue?: boolean;
  stringValue?: string;
  bytesValue?: Uint8Array;
  datasetValue?: {
    numOfColumns?: Int64Input;
    columns?: string[];
    types?: number[];
    rows?: { elements: Record<string, unknown>[] }[];
  };
  templateValue?: {
    version?: string;
    metrics?: MetricInput[];
    templateRef?: string;
    isDefinition?: boolean;
  };
}

export interface PayloadInput {
  timestamp?: Int64Input;
  metrics?: MetricInput[];
  seq?: Int64Input;
  uuid?: string;
  body?: Uint8Array;
}

const root = protobuf.Root.fromJSON(sparkplugBDescriptor as unknown as protobuf.INamespace);
const payloadType = root.lookupType(PAYLOAD_TYPE_NAME);
const metricType = root.lookupType(`${PAYLOAD_TYPE_NAME}.Metric`);

/** Decodes a Sparkplug B payload. Throws (protobufjs's own error) when the bytes are not one. */
export function decodeSparkplugPayload(bytes: Uint8Array): DecodedPayload {
  return payloadType.decode(bytes) as unknown as DecodedPayload;
}

/**
 * Encodes a Sparkplug B payload. trueshift only reads Sparkplug; this is for tests, benchmarks and
 * tools that play an edge node. Negative Int8..Int64 values are written as two's complement in the
 * unsigned fields, as Sparkplug 3.0 section 6.4.17 maps signed types onto uint32 / uint64.
 */
export function encodeSparkplugPayload(payload: PayloadInput): Uint8Array {
  const plain = {
    ...payload,
    timestamp: longBits(payload.timestamp),
    seq: longBits(payload.seq),
    metrics: payload.metrics?.map(metricForEncoding),
  };
  return payloadType.encode(payloadType.fromObject(plain)).finish();
}

/**
 * protobufjs turns a negative number for a uint64 field into 0, and reads decimal text as signed,
 * so every 64-bit input is handed over as its two halves instead.
 */
function longBits(value: Int64Input | undefined): LongBits | undefined {
  if (value === undefined) return undefined;
  const bits = BigInt.asUintN(64, BigInt(value));
  return { low: Number(bits & 0xffffffffn) | 0, high: Number(bits >> 32n) | 0, unsigned: true };
}

function propertyForEncoding(value: PropertyValueInput): object {
  return { ...value, longValue: longBits(value.longValue) };
}

function metricForEncoding(metric: MetricInput): object {
  const { templateValue, datasetValue, properties } = metric;
  return {
    ...metric,
    alias: longBits(metric.alias),
    timestamp: longBits(metric.timestamp),
    longValue: longBits(metric.longValue),
    properties:
      properties === undefined
        ? undefined
        : { keys: properties.keys, values: properties.values.map(propertyForEncoding) },
    datasetValue:
      datasetValue === undefined
        ? undefined
        : { ...datasetValue, numOfColumns: longBits(datasetValue.numOfColumns) },
    templateValue:
      templateValue === undefined
        ? undefined
        : { ...templateValue, metrics: templateValue.metrics?.map(metricForEncoding) },
  };
}

const TWO_32 = 4_294_967_296;

/**
 * A 64-bit field as a number, or null when it lies beyond ±(2^53 − 1): past that a double cannot
 * hold every integer, and a rounded alias, time or value would be silently wrong.
 */
export function int64ToNumber(value: Int64, signed: boolean): number | null {
  if (typeof value === 'number') return Number.isSafeInteger(value) ? value : null;
  const low = value.low >>> 0;
  if (signed && value.high < 0) {
    // Exact while high >= -2^21; below that the sum is rounded but certainly past the limit.
    const n = value.high * TWO_32 + low;
    return n >= -Number.MAX_SAFE_INTEGER ? n : null;
  }
  const n = (value.high >>> 0) * TWO_32 + low;
  return n <= Number.MAX_SAFE_INTEGER ? n : null;
}

/** A 64-bit field as exact decimal text, for reasons that quote a value too large for a number. */
export function int64ToText(value: Int64, signed: boolean): string {
  if (typeof value === 'number') return String(value);
  const bits = (BigInt(value.high >>> 0) << 32n) | BigInt(value.low >>> 0);
  return String(signed ? BigInt.asIntN(64, bits) : bits);
}

const conversion: protobuf.IConversionOptions = { longs: String, bytes: String };

/** A decoded payload as JSON (64-bit fields as decimal text, bytes as base64), for rejections. */
export function payloadToJson(payload: DecodedPayload): string {
  return JSON.stringify(payloadType.toObject(payload as unknown as protobuf.Message, conversion));
}

/** One decoded metric as JSON, for a rejection of that metric alone. */
export function metricToJson(metric: DecodedMetric): string {
  return JSON.stringify(metricType.toObject(metric as unknown as protobuf.Message, conversion));
}
