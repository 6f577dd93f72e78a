import { type ErrorCode, TrueshiftError } from '@trueshift/errors';
import {
  buildRejection,
  checkSample,
  cutRaw,
  type SampleCandidate,
  type SampleContext,
  showValue,
} from '@trueshift/formats';
import type { QuarantineInput, SampleInput } from '@trueshift/store';
import { QUALITY_STALE } from '@trueshift/store';
import { SparkplugDataType } from './sparkplug-b-schema.js';
import {
  type DecodedMetric,
  type DecodedPayload,
  decodeSparkplugPayload,
  type Int64,
  int64ToNumber,
  int64ToText,
  metricToJson,
  payloadToJson,
} from './sparkplug-codec.js';
import { parseSparkplugTopic, sparkplugIdProblem } from './sparkplug-topic.js';

export const DEFAULT_TAG_TEMPLATE = '{group}/{node}/{device}/{metric}';
export const DEFAULT_MAX_PAYLOAD_BYTES = 1_048_576;
export const DEFAULT_MAX_FUTURE_MS = 300_000;

export interface SparkplugSessionOptions {
  /** The Sparkplug group ids taken in; messages of other groups are noted and left alone. */
  groups: readonly string[];
  /**
   * How a metric becomes a tag name: {group}, {node}, {device} and {metric} (the metric's name,
   * slashes and all). For an edge node's own metrics, {device} and one "/" beside it are left out.
   */
  tagTemplate?: string;
  maxPayloadBytes?: number;
  maxFutureMs?: number;
  validRange?: SampleContext['validRange'];
}

export interface SparkplugMessageContext {
  receivedAt: number;
  now: number;
}

/** Metrics left out on purpose: counted, not quarantined (useOf says why). */
export interface SparkplugSkipped {
  /** Strings, text, UUIDs, bytes, files, date-times, arrays, data sets and templates. */
  notNumeric: number;
  /** bdSeq, "Node Control/…" and "Device Control/…": session plumbing, not process values. */
  control: number;
  /** is_transient: the sender asks that the value not be kept (section 6.4.6). */
  transient: number;
}

export type SparkplugEvent =
  | {
      type: 'birth';
      /** The Edge Node Descriptor, group/edge_node (section 6.4.19). */
      node: string;
      device: string | null;
      bdSeq: number | null;
      metrics: number;
      at: number;
    }
  | {
      type: 'death';
      node: string;
      device: string | null;
      bdSeq: number | null;
      /** false: the DEATH did not belong to the current BIRTH and was ignored. */
      matched: boolean;
      reason: string | null;
      at: number;
    }
  | { type: 'seq-gap'; node: string; expected: number; got: number | null; at: number }
  | { type: 'stale-tags'; node: string; device: string | null; tags: string[]; at: number }
  | { type: 'state'; hostId: string; online: boolean; timestamp: number | null; at: number }
  | { type: 'ignored'; topic: string; reason: string; at: number };

export interface SparkplugResult {
  /** Live samples, each judged by checkSample; after a DEATH, the stale markers too. */
  samples: SampleInput[];
  /** is_historical metrics: back-fill, not the tag's current value (section 6.4.6). */
  backfill: SampleInput[];
  rejected: QuarantineInput[];
  events: SparkplugEvent[];
  skipped: SparkplugSkipped;
}

/** What the session knows of one edge node, for health pages and logs. JSON as it stands. */
export interface SparkplugNodeSummary {
  node: string;
  online: boolean;
  bdSeq: number | null;
  lastSeq: number | null;
  metrics: number;
  devices: { device: string; online: boolean; metrics: number }[];
}

export interface SparkplugSession {
  /** Takes one MQTT message. Never throws for anything in the message; call in arrival order. */
  handle(topic: string, payload: Uint8Array, ctx: SparkplugMessageContext): SparkplugResult;
  nodes(): SparkplugNodeSummary[];
}

type Use = 'sample' | keyof SparkplugSkipped;

interface MetricEntry {
  name: string;
  datatype: number;
  tag: string;
  use: Use;
  transient: boolean;
  /** Put before reasons about this metric; built once at BIRTH, not per sample. */
  prefix: string;
}

interface Scope {
  byAlias: Map<number, MetricEntry>;
  byName: Map<string, MetricEntry>;
}

interface DeviceState extends Scope {
  online: boolean;
}

interface NodeState extends Scope {
  descriptor: string;
  group: string;
  node: string;
  online: boolean;
  /** Why the node is not online: never seen born since start, or its NDEATH. */
  offlineBecause: 'never-born' | 'death';
  bdSeq: number | null;
  lastSeq: number | null;
  devices: Map<string, DeviceState>;
}

/** One decoded message on its way through the session. */
interface Message {
  topic: string;
  source: string;
  at: number;
  ctx: SparkplugMessageContext;
  node: NodeState;
  payload: DecodedPayload;
  result: SparkplugResult;
}

const PLACEHOLDER = /\{([a-z]+)\}/g;
const KNOWN_PLACEHOLDERS = new Set(['group', 'node', 'device', 'metric']);
const DEVICE_WITH_SLASH = /\/\{device\}|\{device\}\//g;

// Section 6.4.17 "Datatype Details": the basic types carried in int_value, long_value,
// float_value, double_value or boolean_value; Boolean is stored as 0/1.
const NUMERIC = new Set<number>([
  SparkplugDataType.Int8,
  SparkplugDataType.Int16,
  SparkplugDataType.Int32,
  SparkplugDataType.Int64,
  SparkplugDataType.UInt8,
  SparkplugDataType.UInt16,
  SparkplugDataType.UInt32,
  SparkplugDataType.UInt64,
  SparkplugDataType.Float,
  SparkplugDataType.Double,
  SparkplugDataType.Boolean,
]);
const SIGNED_BITS = new Map<number, number>([
  [SparkplugDataType.Int8, 8],
  [SparkplugDataType.Int16, 16],
  [SparkplugDataType.Int32, 32],
  [SparkplugDataType.Int64, 64],
]);
const DATATYPE_NAMES = new Map<number, string>(
  Object.entries(SparkplugDataType).map(([name, id]) => [id, name]),
);
const LAST_DATATYPE = SparkplugDataType.DateTimeArray;

function datatypeName(datatype: number): string {
  return DATATYPE_NAMES.get(datatype) ?? `datatype ${datatype}`;
}

/** Every problem of the options, so start-up can list them all. */
export function sparkplugOptionProblems(options: SparkplugSessionOptions): string[] {
  const problems: string[] = [];
  if (options.groups.length === 0) problems.push('no Sparkplug group is configured.');
  for (const group of options.groups) {
    const problem = sparkplugIdProblem('group id', group);
    if (problem !== null) problems.push(problem);
    // spBv1.0/STATE/# is where Host Applications announce themselves (section 4.2.3).
    if (group === 'STATE') problems.push('"STATE" is reserved and cannot be a group id.');
  }
  if (new Set(options.groups).size !== options.groups.length) {
    problems.push('a Sparkplug group is listed twice.');
  }
  const template = options.tagTemplate ?? DEFAULT_TAG_TEMPLATE;
  if (!template.includes('{metric}')) {
    problems.push(`the tag template ${JSON.stringify(template)} does not use {metric}.`);
  }
  for (const match of template.matchAll(PLACEHOLDER)) {
    const key = match[1] ?? '';
    if (!KNOWN_PLACEHOLDERS.has(key)) {
      problems.push(
        `the tag template uses {${key}}; only {group}, {node}, {device} and {metric} exist.`,
      );
    }
  }
  for (const [name, value] of [
    ['maxPayloadBytes', options.maxPayloadBytes],
    ['maxFutureMs', options.maxFutureMs],
  ] as const) {
    if (value !== undefined && !(Number.isInteger(value) && value >= 0)) {
      problems.push(`${name} must be a whole number of at least 0.`);
    }
  }
  return problems;
}

function fillTemplate(template: string, values: Record<string, string>): string {
  return template.replace(PLACEHOLDER, (whole, key: string) => values[key] ?? whole);
}

/** Metric timestamps, seq, bdSeq and aliases are unsigned 64-bit (section 6.4.5, 6.4.6). */
function unsigned(value: Int64): number | null {
  return int64ToNumber(value, false);
}

/** Whether a decoded optional field was on the wire: absent ones read as their defaults. */
function has<T extends object>(object: T, key: keyof T & string): boolean {
  return Object.hasOwn(object, key);
}

/**
 * A Float as the sender wrote it: float_value holds the nearest float32, so 12.1 arrives as
 * 12.100000381469727. The shortest decimal that rounds to the same float32 is the one the edge
 * node meant, and is what an engineer expects to see stored.
 */
function shortestFloat32(value: number): number {
  if (!Number.isFinite(value) || Number.isInteger(value)) return value;
  // Every decimal of at most 6 significant digits survives a trip through float32 (FLT_DIG = 6,
  // from memory), and two such decimals never share a float32; so when 6 digits give the value
  // back, they are the shortest form, trailing zeros and all. 9 digits always do (FLT_DECIMAL_DIG).
  for (let digits = 6; digits <= 9; digits++) {
    const candidate = Number(value.toPrecision(digits));
    if (Math.fround(candidate) === value) return candidate;
  }
  return value;
}

/**
 * A signed type sent in the unsigned int_value. Senders differ: some send the 32-bit two's
 * complement (-1 as 0xFFFFFFFF), some the type's own width (-1 as an Int8 0xFF). Both read as -1;
 * a value outside the type's width is kept as sent rather than cut to fit.
 */
function signedFrom32(value: number, bits: number): number {
  const span = 2 ** bits;
  if (bits < 32 && value < span) return value >= span / 2 ? value - span : value;
  return value | 0;
}

type Reading = { ok: true; value: unknown } | { ok: false; code: ErrorCode; reason: string };

/** The metric's value as a number for checkSample, null when is_null, undefined when absent. */
function readValue(metric: DecodedMetric, datatype: number): Reading {
  // Section 6.4.6: with is_null set "the value can be omitted altogether".
  if (metric.isNull === true) return { ok: true, value: null };
  if (has(metric, 'doubleValue')) return { ok: true, value: metric.doubleValue };
  if (has(metric, 'floatValue')) {
    return { ok: true, value: shortestFloat32(metric.floatValue ?? Number.NaN) };
  }
  const bits = SIGNED_BITS.get(datatype);
  if (has(metric, 'intValue')) {
    const raw = metric.intValue ?? 0;
    return { ok: true, value: bits === undefined ? raw >>> 0 : signedFrom32(raw, bits) };
  }
  if (has(metric, 'longValue') && metric.longValue !== undefined) {
    const signed = bits !== undefined;
    const value = int64ToNumber(metric.longValue, signed);
    if (value === null) {
      return {
        ok: false,
        code: 'SPARKPLUG_VALUE_RANGE',
        reason: `the ${datatypeName(datatype)} value ${int64ToText(metric.longValue, signed)} is beyond ±(2^53 − 1), where a number can no longer hold every integer; it is not rounded.`,
      };
    }
    return { ok: true, value };
  }
  if (has(metric, 'booleanValue')) return { ok: true, value: metric.booleanValue === true ? 1 : 0 };
  for (const field of [
    'stringValue',
    'bytesValue',
    'datasetValue',
    'templateValue',
    'extensionValue',
  ] as const) {
    if (has(metric, field)) {
      return {
        ok: false,
        code: 'SPARKPLUG_INVALID',
        reason: `the metric is declared ${datatypeName(datatype)} but carries a ${field}.`,
      };
    }
  }
  return { ok: true, value: undefined };
}

/** The 'Quality' property (section 6.4.9.1: 0 bad, 192 good, 500 stale), or undefined. */
function readQuality(metric: DecodedMetric): unknown {
  const properties = metric.properties;
  if (properties === null || properties === undefined) return undefined;
  const index = properties.keys.indexOf('Quality');
  if (index < 0) return undefined;
  const property = properties.values[index];
  if (property === undefined || property.isNull === true) return undefined;
  if (has(property, 'intValue')) return (property.intValue ?? 0) | 0;
  if (has(property, 'longValue') && property.longValue !== undefined) {
    return int64ToNumber(property.longValue, true) ?? int64ToText(property.longValue, true);
  }
  // A Quality of another type is passed on as is, so checkSample names it in its reason.
  if (has(property, 'stringValue')) return property.stringValue;
  if (has(property, 'doubleValue')) return property.doubleValue;
  if (has(property, 'floatValue')) return property.floatValue;
  return undefined;
}

/** The bdSeq metric of an NBIRTH or NDEATH (section 4.2.1.1.2, 6.4.25), or null when missing. */
function readBdSeq(payload: DecodedPayload): { value: number | null; problem: string | null } {
  const metric = payload.metrics.find((m) => has(m, 'name') && m.name === 'bdSeq');
  if (metric === undefined) return { value: null, problem: 'it carries no bdSeq metric' };
  if (has(metric, 'longValue') && metric.longValue !== undefined) {
    const value = unsigned(metric.longValue);
    if (value === null) {
      return {
        value: null,
        problem: `its bdSeq ${int64ToText(metric.longValue, false)} is beyond 2^53 − 1`,
      };
    }
    return { value, problem: null };
  }
  if (has(metric, 'intValue')) return { value: (metric.intValue ?? 0) >>> 0, problem: null };
  return { value: null, problem: 'its bdSeq metric has no integer value' };
}

function emptyResult(): SparkplugResult {
  return {
    samples: [],
    backfill: [],
    rejected: [],
    events: [],
    skipped: { notNumeric: 0, control: 0, transient: 0 },
  };
}

function base64(bytes: Uint8Array, limit: number): string {
  const cut = bytes.length > limit ? bytes.subarray(0, limit) : bytes;
  return `base64:${Buffer.from(cut.buffer, cut.byteOffset, cut.byteLength).toString('base64')}`;
}

/**
 * The Sparkplug B session of a Host Application that only listens (Sparkplug 3.0): per edge node,
 * the metrics announced by NBIRTH and DBIRTH (name, alias, datatype), seq, bdSeq and whether the
 * node and its devices are online. Pure: time comes with every call.
 *
 * Restarts: the state is not kept. After a restart a node's aliases are unknown until its next
 * NBIRTH, and its DATA until then is quarantined with a reason saying so. Keeping alias maps over a
 * restart would be unsafe: QoS 0 messages are not queued for an absent subscriber, so an NBIRTH
 * sent meanwhile, which may hand out aliases afresh, would go unseen and values would land on the
 * wrong tags. This service sends no rebirth request (NCMD), so it cannot ask for the BIRTH again.
 */
export function createSparkplugSession(options: SparkplugSessionOptions): SparkplugSession {
  const problems = sparkplugOptionProblems(options);
  if (problems.length > 0) {
    throw new TrueshiftError('CONFIG_INVALID', `Sparkplug: ${problems.join(' ')}`);
  }
  const groups = new Set(options.groups);
  const deviceTemplate = options.tagTemplate ?? DEFAULT_TAG_TEMPLATE;
  const nodeTemplate = deviceTemplate.replace(DEVICE_WITH_SLASH, '').replaceAll('{device}', '');
  const maxPayloadBytes = options.maxPayloadBytes ?? DEFAULT_MAX_PAYLOAD_BYTES;
  const maxFutureMs = options.maxFutureMs ?? DEFAULT_MAX_FUTURE_MS;
  const nodes = new Map<string, NodeState>();

  const tagOf = (node: NodeState, device: string | null, metric: string): string =>
    fillTemplate(device === null ? nodeTemplate : deviceTemplate, {
      group: node.group,
      node: node.node,
      device: device ?? '',
      metric,
    });

  function handle(
    topic: string,
    payload: Uint8Array,
    ctx: SparkplugMessageContext,
  ): SparkplugResult {
    const result = emptyResult();
    const source = `sparkplug:${topic}`;
    const at = ctx.receivedAt;
    const reject: Reject = (code, reason, raw) => {
      result.rejected.push(buildRejection({ source, raw, receivedAt: at }, code, reason, null));
    };

    if (payload.length > maxPayloadBytes) {
      const reason = `the payload is ${payload.length} bytes; at most ${maxPayloadBytes} are allowed.`;
      reject('PAYLOAD_TOO_LARGE', reason, base64(payload, 1024));
      return result;
    }
    const parsed = parseSparkplugTopic(topic);
    if ('problem' in parsed) {
      reject('SPARKPLUG_INVALID', parsed.problem, base64(payload, 16_384));
      return result;
    }
    if (parsed.type === 'STATE') {
      if (payload.length === 0) {
        // STATE is retained (section 4.2.3); an empty message is how a retained one is cleared.
        const reason = 'an empty STATE message clears a retained one; it says nothing.';
        result.events.push({ type: 'ignored', topic, reason, at });
      } else {
        readState(parsed.hostId, payload, result, reject, at);
      }
      return result;
    }
    if (!groups.has(parsed.group)) {
      const reason = `the group ${JSON.stringify(parsed.group)} is not one of the configured groups.`;
      result.events.push({ type: 'ignored', topic, reason, at });
      return result;
    }
    if (parsed.type === 'NCMD' || parsed.type === 'DCMD') {
      // Commands are a Host Application writing to an edge node, not measurements (section 4.2.1.4).
      const reason = `${parsed.type} messages are commands to the edge node, not measurements.`;
      result.events.push({ type: 'ignored', topic, reason, at });
      return result;
    }

    let decoded: DecodedPayload;
    try {
      decoded = decodeSparkplugPayload(payload);
    } catch (error) {
      const detail = error instanceof Error ? ` (${error.message})` : '';
      reject(
        'SPARKPLUG_DECODE',
        `the payload is not a Sparkplug B protobuf payload${detail}.`,
        base64(payload, 16_384),
      );
      return result;
    }

    const descriptor = `${parsed.group}/${parsed.node}`;
    let node = nodes.get(descriptor);
    if (node === undefined) {
      node = {
        descriptor,
        group: parsed.group,
        node: parsed.node,
        online: false,
        offlineBecause: 'never-born',
        bdSeq: null,
        lastSeq: null,
        byAlias: new Map(),
        byName: new Map(),
        devices: new Map(),
      };
      nodes.set(descriptor, node);
    }
    const message: Message = { topic, source, at, ctx, node, payload: decoded, result };

    switch (parsed.type) {
      case 'NBIRTH':
        nodeBirth(message);
        break;
      case 'NDEATH':
        nodeDeath(message);
        break;
      case 'NDATA':
        if (requireBirth(message, null)) takeMetrics(message, node, null);
        break;
      case 'DBIRTH':
        deviceBirth(message, parsed.device);
        break;
      case 'DDEATH':
        deviceDeath(message, parsed.device);
        break;
      case 'DDATA': {
        if (!requireBirth(message, parsed.device)) break;
        const device = node.devices.get(parsed.device);
        if (device !== undefined) takeMetrics(message, device, parsed.device);
        break;
      }
    }
    return result;
  }

  function rejectMessage(message: Message, code: ErrorCode, reason: string): void {
    message.result.rejected.push(
      buildRejection(
        { source: message.source, raw: payloadToJson(message.payload), receivedAt: message.at },
        code,
        reason,
        null,
      ),
    );
  }

  /**
   * seq runs 0..255 over every message of the node but NDEATH, wrapping to 0 (section 6.4.5,
   * tck-id-payloads-sequence-num-incrementing). A gap means messages were lost or reordered: QoS 0
   * gives no redelivery, so the gap is reported and the count starts again from what arrived.
   */
  function checkSeq(message: Message): void {
    const { node, payload } = message;
    const seq = has(payload, 'seq') && payload.seq !== undefined ? unsigned(payload.seq) : null;
    const valid = seq !== null && seq <= 255 ? seq : null;
    if (node.lastSeq === null) {
      node.lastSeq = valid;
      return;
    }
    const expected = (node.lastSeq + 1) % 256;
    if (valid !== expected) {
      message.result.events.push({
        type: 'seq-gap',
        node: node.descriptor,
        expected,
        got: seq,
        at: message.at,
      });
    }
    // A missing or impossible seq is taken as the expected one, so one bad message is one gap.
    node.lastSeq = valid ?? expected;
  }

  /** Why the node cannot take DATA or a DBIRTH now, or null when it is online. */
  function nodeNotBorn(message: Message): boolean {
    const { node } = message;
    if (node.online) return false;
    const why =
      node.offlineBecause === 'death'
        ? `edge node ${node.descriptor} sent its NDEATH and no NBIRTH since`
        : `no NBIRTH from edge node ${node.descriptor} has been seen since this service started`;
    rejectMessage(
      message,
      'SPARKPLUG_NO_BIRTH',
      `${why}; metric names and aliases come only from a BIRTH, and this service does not request rebirths, so the message is kept here until the node's next NBIRTH.`,
    );
    return true;
  }

  /** Whether DATA can be read: the node (and device) were born and have not died since. */
  function requireBirth(message: Message, device: string | null): boolean {
    if (nodeNotBorn(message)) return false;
    checkSeq(message);
    if (device === null) return true;
    const { node } = message;
    const state = node.devices.get(device);
    if (!state?.online) {
      const why =
        state === undefined
          ? `no DBIRTH from device ${JSON.stringify(device)} of edge node ${node.descriptor} has been seen in the node's current session`
          : `device ${JSON.stringify(device)} of edge node ${node.descriptor} sent its DDEATH and no DBIRTH since`;
      rejectMessage(
        message,
        'SPARKPLUG_NO_BIRTH',
        `${why}; the device's metrics are known only from its DBIRTH.`,
      );
      return false;
    }
    return true;
  }

  function nodeBirth(message: Message): void {
    const { node, payload, result, at } = message;
    const bdSeq = readBdSeq(payload);
    // Section 4.2.1.1.2: an NBIRTH starts a new session; devices must send DBIRTH again, so what
    // was known of them goes (they "will still have STALE metric quality until ... new DBIRTH").
    node.byAlias = new Map();
    node.byName = new Map();
    node.devices = new Map();
    node.online = true;
    node.bdSeq = bdSeq.value;
    node.lastSeq = null;
    checkSeq(message);
    const entries = learnMetrics(message, node, null);
    result.events.push({
      type: 'birth',
      node: node.descriptor,
      device: null,
      bdSeq: bdSeq.value,
      metrics: node.byName.size,
      at,
    });
    takeMetrics(message, node, null, entries);
  }

  function deviceBirth(message: Message, deviceId: string): void {
    const { node, result, at } = message;
    if (nodeNotBorn(message)) return;
    checkSeq(message);
    const device: DeviceState = { byAlias: new Map(), byName: new Map(), online: true };
    node.devices.set(deviceId, device);
    const entries = learnMetrics(message, device, deviceId);
    result.events.push({
      type: 'birth',
      node: node.descriptor,
      device: deviceId,
      bdSeq: node.bdSeq,
      metrics: device.byName.size,
      at,
    });
    takeMetrics(message, device, deviceId, entries);
  }

  /**
   * Section 5.5 (tck-id-operational-behavior-edge-node-termination-host-action-ndeath-*): on an
   * NDEATH whose bdSeq matches the NBIRTH's, the node and its devices go offline and every metric
   * of the NBIRTH and the DBIRTHs is STALE from the host's receive time. An NDEATH with another
   * bdSeq belongs to an older session (the broker may deliver the will late) and is ignored.
   */
  function nodeDeath(message: Message): void {
    const { node, payload, result, at } = message;
    const bdSeq = readBdSeq(payload);
    let reason: string | null = null;
    if (!node.online) {
      reason =
        node.offlineBecause === 'death'
          ? 'the edge node is already dead'
          : 'no NBIRTH of this edge node has been seen, so there is no session to end';
    } else if (bdSeq.problem !== null && node.bdSeq !== null) {
      reason = `${bdSeq.problem}, so it cannot be matched to the NBIRTH (bdSeq ${node.bdSeq})`;
    } else if (bdSeq.value !== node.bdSeq) {
      reason = `its bdSeq ${String(bdSeq.value)} is not the current NBIRTH's ${String(node.bdSeq)}`;
    }
    result.events.push({
      type: 'death',
      node: node.descriptor,
      device: null,
      bdSeq: bdSeq.value,
      matched: reason === null,
      reason,
      at,
    });
    if (reason !== null) return;
    node.online = false;
    node.offlineBecause = 'death';
    const tags = numericTags(node);
    for (const device of node.devices.values()) {
      if (device.online) tags.push(...numericTags(device));
      device.online = false;
    }
    markStale(message, tags, null, at);
  }

  /**
   * Section 5.7: a DDEATH makes the device offline and its DBIRTH metrics STALE "using the
   * timestamp in the DDEATH payload". DDEATH carries a seq (section 4.2.2.3.2) but no bdSeq.
   */
  function deviceDeath(message: Message, deviceId: string): void {
    const { node, payload, result, at } = message;
    let reason: string | null = null;
    let device: DeviceState | undefined;
    if (!node.online) {
      reason = 'the edge node has no current session';
    } else {
      checkSeq(message);
      device = node.devices.get(deviceId);
      if (device === undefined) {
        reason = 'no DBIRTH of this device has been seen in the current session';
      } else if (!device.online) {
        reason = 'the device is already dead';
      }
    }
    result.events.push({
      type: 'death',
      node: node.descriptor,
      device: deviceId,
      bdSeq: null,
      matched: reason === null,
      reason,
      at,
    });
    if (device === undefined || reason !== null) return;
    device.online = false;
    const stamped =
      has(payload, 'timestamp') && payload.timestamp !== undefined
        ? unsigned(payload.timestamp)
        : null;
    markStale(message, numericTags(device), deviceId, stamped ?? at);
  }

  function numericTags(scope: Scope): string[] {
    const tags: string[] = [];
    for (const entry of scope.byName.values()) {
      if (entry.use === 'sample' && !entry.transient) tags.push(entry.tag);
    }
    return tags;
  }

  /**
   * Stale markers (no value, quality 500) go to the store beside the event, so the data-quality
   * watch sees the death even after a restart of the analyser; the event tells it at once.
   */
  function markStale(message: Message, tags: string[], device: string | null, t: number): void {
    const { result, source, ctx, node } = message;
    const sampleCtx: SampleContext = {
      source,
      raw: '',
      receivedAt: ctx.receivedAt,
      now: ctx.now,
      maxFutureMs,
    };
    const marked: string[] = [];
    for (const tag of tags) {
      const check = checkSample({ tag, t, value: null, quality: QUALITY_STALE }, sampleCtx);
      if (check.ok) {
        result.samples.push(check.sample);
        marked.push(tag);
      } else {
        check.rejection.raw = cutRaw(JSON.stringify({ tag, t, quality: QUALITY_STALE }));
        result.rejected.push(check.rejection);
      }
    }
    result.events.push({
      type: 'stale-tags',
      node: node.descriptor,
      device,
      tags: marked,
      at: message.at,
    });
  }

  /**
   * Learns a BIRTH's metrics: every metric of a BIRTH carries its name and datatype, and an alias
   * when aliases are used (section 6.4.6, tck-id-payloads-alias-birth-requirement). Returns each
   * metric's entry in order, null for those rejected (with the reason) instead.
   */
  function learnMetrics(
    message: Message,
    scope: Scope,
    device: string | null,
  ): (MetricEntry | null)[] {
    const { node, payload } = message;
    const entries: (MetricEntry | null)[] = [];
    for (const metric of payload.metrics) {
      entries.push(null);
      const fail = (reason: string, code: ErrorCode = 'SPARKPLUG_INVALID'): void => {
        message.result.rejected.push(
          buildRejection(
            { source: message.source, raw: metricToJson(metric), receivedAt: message.at },
            code,
            reason,
            null,
          ),
        );
      };
      if (!has(metric, 'name') || metric.name === undefined || metric.name === '') {
        fail('a BIRTH metric has no name; every BIRTH metric must carry one (section 6.4.6).');
        continue;
      }
      const name = metric.name;
      const datatype = metric.datatype ?? 0;
      if (!has(metric, 'datatype') || datatype === 0 || datatype > LAST_DATATYPE) {
        fail(
          `BIRTH metric ${showValue(name)} has ${has(metric, 'datatype') ? `datatype ${datatype}, which is not a Sparkplug data type` : 'no datatype'} (section 6.4.16).`,
        );
        continue;
      }
      let alias: number | null = null;
      if (has(metric, 'alias') && metric.alias !== undefined) {
        alias = unsigned(metric.alias);
        if (alias === null) {
          fail(
            `BIRTH metric ${showValue(name)} has the alias ${int64ToText(metric.alias, false)}, beyond 2^53 − 1.`,
            'SPARKPLUG_VALUE_RANGE',
          );
          continue;
        }
        if (scope.byAlias.has(alias)) {
          fail(
            `BIRTH metric ${showValue(name)} reuses alias ${alias} of ${showValue(scope.byAlias.get(alias)?.name)}; aliases are unique per edge node (section 6.4.6).`,
          );
          continue;
        }
      }
      if (scope.byName.has(name)) {
        fail(`BIRTH metric ${showValue(name)} appears twice in the BIRTH.`);
        continue;
      }
      const entry: MetricEntry = {
        name,
        datatype,
        tag: tagOf(node, device, name),
        use: useOf(name, datatype),
        transient: metric.isTransient === true,
        prefix: `Metric ${showValue(name)}: `,
      };
      scope.byName.set(name, entry);
      if (alias !== null) scope.byAlias.set(alias, entry);
      entries[entries.length - 1] = entry;
    }
    return entries;
  }

  /**
   * Non-numeric metrics are skipped and counted rather than quarantined: they are valid Sparkplug
   * data that trueshift, which judges shifts in numbers, has no use for. Quarantining every
   * string or data set a plant publishes would bury the real errors.
   */
  function useOf(name: string, datatype: number): Use {
    if (
      name === 'bdSeq' ||
      name.startsWith('Node Control/') ||
      name.startsWith('Device Control/')
    ) {
      return 'control';
    }
    return NUMERIC.has(datatype) ? 'sample' : 'notNumeric';
  }

  /**
   * Turns a BIRTH's or DATA's metrics into samples, back-fill and rejections. A BIRTH hands in the
   * entries it learnt, in metric order, so a metric is never taken for another sharing its alias.
   */
  function takeMetrics(
    message: Message,
    scope: Scope,
    device: string | null,
    birthEntries?: readonly (MetricEntry | null)[],
  ): void {
    const { payload, result, ctx, source } = message;
    const payloadTime =
      has(payload, 'timestamp') && payload.timestamp !== undefined
        ? unsigned(payload.timestamp)
        : null;
    const sampleCtx: SampleContext = {
      source,
      raw: '',
      receivedAt: ctx.receivedAt,
      now: ctx.now,
      maxFutureMs,
      validRange: options.validRange,
      timeDefaultsToReceive: true,
    };
    const candidate: SampleCandidate = {
      tag: '',
      t: undefined,
      value: undefined,
      quality: undefined,
    };
    for (let i = 0; i < payload.metrics.length; i++) {
      const metric = payload.metrics[i];
      if (metric === undefined) continue;
      const entry =
        birthEntries === undefined
          ? resolve(message, scope, device, metric)
          : (birthEntries[i] ?? null);
      if (entry === null) continue;
      if (entry.use !== 'sample') {
        result.skipped[entry.use]++;
        continue;
      }
      if (entry.transient || metric.isTransient === true) {
        result.skipped.transient++;
        continue;
      }
      sampleCtx.reasonPrefix = entry.prefix;
      const historical = metric.isHistorical === true;
      const fail = (code: ErrorCode, reason: string): void => {
        const rejection = buildRejection(sampleCtx, code, reason, entry.tag);
        rejection.raw = cutRaw(metricToJson(metric));
        result.rejected.push(rejection);
      };

      // Section 6.4.6: the metric timestamp is when the value was captured; the payload's is
      // when the message was sent, a fair stand-in for a live value but not for a historical one.
      let t: number | null = payloadTime;
      if (has(metric, 'timestamp') && metric.timestamp !== undefined) {
        t = unsigned(metric.timestamp);
        if (t === null) {
          fail(
            'SPARKPLUG_VALUE_RANGE',
            `the timestamp ${int64ToText(metric.timestamp, false)} is beyond 2^53 − 1 ms.`,
          );
          continue;
        }
      } else if (historical) {
        fail(
          'TIME_MISSING',
          'the historical metric has no timestamp of its own; the payload timestamp is when it was sent, not when it was measured.',
        );
        continue;
      }
      const reading = readValue(metric, entry.datatype);
      if (!reading.ok) {
        fail(reading.code, reading.reason);
        continue;
      }
      candidate.tag = entry.tag;
      candidate.t = t ?? undefined;
      candidate.value = reading.value;
      candidate.quality = readQuality(metric);
      const check = checkSample(candidate, sampleCtx);
      if (check.ok) {
        (historical ? result.backfill : result.samples).push(check.sample);
      } else {
        check.rejection.raw = cutRaw(metricToJson(metric));
        result.rejected.push(check.rejection);
      }
    }
  }

  /**
   * The BIRTH entry of a DATA metric: by alias when it has one (DATA metrics carry only the alias,
   * tck-id-payloads-alias-data-cmd-requirement), otherwise by name. In a BIRTH the metric is its
   * own entry.
   */
  function resolve(
    message: Message,
    scope: Scope,
    device: string | null,
    metric: DecodedMetric,
  ): MetricEntry | null {
    const named = has(metric, 'name') && metric.name !== undefined && metric.name !== '';
    if (has(metric, 'alias') && metric.alias !== undefined) {
      const alias = unsigned(metric.alias);
      const entry = alias === null ? undefined : scope.byAlias.get(alias);
      if (entry !== undefined) return entry;
      if (named) {
        const byName = scope.byName.get(metric.name ?? '');
        if (byName !== undefined) return byName;
      }
      const where =
        device === null
          ? `the NBIRTH of edge node ${message.node.descriptor}`
          : `the DBIRTH of device ${JSON.stringify(device)} of edge node ${message.node.descriptor}`;
      const reason = `alias ${int64ToText(metric.alias, false)} was not announced in ${where}; an edge node must announce every metric in its BIRTH (section 4.2.1.1.2).`;
      message.result.rejected.push(
        buildRejection(
          { source: message.source, raw: metricToJson(metric), receivedAt: message.at },
          'SPARKPLUG_UNKNOWN_ALIAS',
          reason,
          null,
        ),
      );
      return null;
    }
    if (named) {
      const entry = scope.byName.get(metric.name ?? '');
      if (entry !== undefined) return entry;
      message.result.rejected.push(
        buildRejection(
          { source: message.source, raw: metricToJson(metric), receivedAt: message.at },
          'SPARKPLUG_UNKNOWN_ALIAS',
          `the metric ${showValue(metric.name)} was not announced in the BIRTH.`,
          null,
        ),
      );
      return null;
    }
    message.result.rejected.push(
      buildRejection(
        { source: message.source, raw: metricToJson(metric), receivedAt: message.at },
        'SPARKPLUG_INVALID',
        'a DATA metric has neither an alias nor a name, so it belongs to no metric (section 6.4.6).',
        null,
      ),
    );
    return null;
  }

  return {
    handle,
    nodes() {
      return [...nodes.values()].map((node) => ({
        node: node.descriptor,
        online: node.online,
        bdSeq: node.bdSeq,
        lastSeq: node.lastSeq,
        metrics: node.byName.size,
        devices: [...node.devices.entries()].map(([device, state]) => ({
          device,
          online: state.online,
          metrics: state.byName.size,
        })),
      }));
    },
  };
}

type Reject = (code: ErrorCode, reason: string, raw: string) => void;

/**
 * A Host Application's STATE (section 4.2.3, 3.0 form): UTF-8 JSON {"online": bool, "timestamp":
 * ms}. Noted as an event; trueshift does not act on other hosts' state.
 */
function readState(
  hostId: string,
  payload: Uint8Array,
  result: SparkplugResult,
  reject: Reject,
  at: number,
): void {
  const text = Buffer.from(payload.buffer, payload.byteOffset, payload.byteLength).toString('utf8');
  let parsed: unknown;
  try {
    parsed = JSON.parse(text);
  } catch {
    parsed = undefined;
  }
  if (
    typeof parsed !== 'object' ||
    parsed === null ||
    typeof (parsed as { online?: unknown }).online !== 'boolean'
  ) {
    reject(
      'SPARKPLUG_DECODE',
      `the STATE message of host ${JSON.stringify(hostId)} is not JSON with a boolean "online" (Sparkplug 3.0 section 4.2.3).`,
      text,
    );
    return;
  }
  const { online, timestamp } = parsed as { online: boolean; timestamp?: unknown };
  result.events.push({
    type: 'state',
    hostId,
    online,
    timestamp: typeof timestamp === 'number' && Number.isFinite(timestamp) ? timestamp : null,
    at,
  });
}
