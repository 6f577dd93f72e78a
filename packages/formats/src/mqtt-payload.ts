import type { QuarantineInput, SampleInput } from '@trueshift/store';
import {
  buildRejection,
  checkSample,
  kindOf,
  type ParsedSamples,
  RAW_LIMIT_BYTES,
  rawOf,
  type SampleContext,
  showValue,
} from './sample-checks.js';

/** One MQTT subscription from the configuration, and how its messages become samples. */
export interface SubscriptionSpec {
  /** An MQTT topic filter, e.g. "site/+/+/pv" or "plant/#"; "$share/<group>/" is allowed. */
  filter: string;
  /** The tag name, with {1}..{n} for topic levels (1-based) and {#} for the levels under a trailing #. */
  tag: string;
  format: 'number' | 'json';
  /** Dot paths into a JSON payload; default "value", "time", "quality". */
  valueField?: string;
  timeField?: string;
  qualityField?: string;
  /** How a numeric JSON time is counted; default 'ms'. */
  timeUnit?: 'ms' | 's';
}

export interface MqttMessageContext {
  receivedAt: number;
  now: number;
  maxFutureMs: number;
  maxPayloadBytes: number;
  validRange?: SampleContext['validRange'];
}

const PLACEHOLDER = /\{(\d+|#)\}/g;
const SHARED_PREFIX = /^\$share\/[^/#+]+\//;

/** The filter a broker matches against topics: without the "$share/<group>/" of MQTT 5. */
function effectiveFilter(filter: string): string {
  return filter.replace(SHARED_PREFIX, '');
}

/** Why a topic filter is not valid under MQTT 3.1.1 / 5 rules, or null when it is. */
export function topicFilterProblem(filter: string): string | null {
  if (filter.startsWith('$share/') && !SHARED_PREFIX.test(filter)) {
    return `the shared subscription ${JSON.stringify(filter)} needs a group name and a filter.`;
  }
  const own = effectiveFilter(filter);
  if (own === '') return 'the topic filter is empty.';
  if (own.includes('\u0000')) return 'the topic filter contains a null character.';
  const levels = own.split('/');
  for (let i = 0; i < levels.length; i++) {
    const level = levels[i] ?? '';
    if (level === '#' && i !== levels.length - 1) {
      return `in the topic filter ${JSON.stringify(filter)}, "#" may only be the last level.`;
    }
    if (level !== '#' && level !== '+' && (level.includes('#') || level.includes('+'))) {
      return `in the topic filter ${JSON.stringify(filter)}, a wildcard must fill a whole level.`;
    }
  }
  return null;
}

/**
 * Matches a topic name against a topic filter ("+" one level, "#" the remaining levels, including
 * none). Returns the topic's levels, or null when it does not match. Topics starting with "$" are
 * not matched by a leading wildcard, as the MQTT specification requires.
 */
export function matchTopic(filter: string, topic: string): string[] | null {
  if (topic === '' || topic.includes('+') || topic.includes('#') || topic.includes('\u0000')) {
    return null;
  }
  if (topicFilterProblem(filter) !== null) return null;
  const wanted = effectiveFilter(filter).split('/');
  const levels = topic.split('/');
  if (topic.startsWith('$') && (wanted[0] === '+' || wanted[0] === '#')) return null;
  for (let i = 0; i < wanted.length; i++) {
    const part = wanted[i];
    if (part === '#') return levels;
    if (i >= levels.length) return null;
    if (part !== '+' && part !== levels[i]) return null;
  }
  return levels.length === wanted.length ? levels : null;
}

/**
 * Fills a tag template from topic levels: {1}..{n} are levels (1-based), {#} the levels a trailing
 * "#" of `filter` matched, joined with "/". Returns null when a placeholder has nothing to fill it.
 */
export function tagFromTopic(
  template: string,
  levels: readonly string[],
  filter?: string,
): string | null {
  let tag = '';
  let from = 0;
  for (const match of template.matchAll(PLACEHOLDER)) {
    const key = match[1] ?? '';
    let fill: string | undefined;
    if (key === '#') {
      const wanted = filter === undefined ? [] : effectiveFilter(filter).split('/');
      if (wanted[wanted.length - 1] === '#') fill = levels.slice(wanted.length - 1).join('/');
    } else {
      fill = levels[Number(key) - 1];
    }
    if (fill === undefined) return null;
    tag += template.slice(from, match.index) + fill;
    from = match.index + match[0].length;
  }
  return tag + template.slice(from);
}

function pathProblem(path: string | undefined, name: string): string | null {
  if (path === undefined) return null;
  if (path === '' || path.split('.').some((part) => part === '')) {
    return `${name} ${JSON.stringify(path)} is not a dot path such as "value" or "pv.val".`;
  }
  return null;
}

/** Every problem of a subscription from the configuration, so start-up can list them all. */
export function subscriptionProblems(spec: SubscriptionSpec): string[] {
  const problems: string[] = [];
  const filterProblem = topicFilterProblem(spec.filter);
  if (filterProblem !== null) problems.push(filterProblem);
  const wanted = effectiveFilter(spec.filter).split('/');
  const hasHash = wanted[wanted.length - 1] === '#';
  if (spec.tag === '') problems.push('the tag template is empty.');
  for (const match of spec.tag.matchAll(PLACEHOLDER)) {
    const key = match[1] ?? '';
    if (key === '#') {
      if (!hasHash) {
        problems.push(
          `the tag template uses {#} but the filter ${JSON.stringify(spec.filter)} does not end in "#".`,
        );
      }
    } else {
      const index = Number(key);
      const fixedLevels = hasHash ? wanted.length - 1 : wanted.length;
      if (index < 1 || (!hasHash && index > fixedLevels)) {
        problems.push(
          `the tag template uses {${key}} but the filter ${JSON.stringify(spec.filter)} has ${fixedLevels} level${fixedLevels === 1 ? '' : 's'}.`,
        );
      }
    }
  }
  if ((spec.format as string) !== 'number' && (spec.format as string) !== 'json') {
    problems.push(`the format ${JSON.stringify(spec.format)} is neither "number" nor "json".`);
  }
  if (spec.timeUnit !== undefined && spec.timeUnit !== 'ms' && (spec.timeUnit as string) !== 's') {
    problems.push(`the time unit ${JSON.stringify(spec.timeUnit)} is neither "ms" nor "s".`);
  }
  for (const [path, name] of [
    [spec.valueField, 'the value field'],
    [spec.timeField, 'the time field'],
    [spec.qualityField, 'the quality field'],
  ] as const) {
    const problem = pathProblem(path, name);
    if (problem !== null) problems.push(problem);
  }
  return problems;
}

/** Shows bytes that are not UTF-8 so nothing is lost: printable ASCII as is, the rest as \xNN. */
function showBytes(bytes: Uint8Array): string {
  let text = '';
  const end = Math.min(bytes.length, RAW_LIMIT_BYTES / 4);
  for (let i = 0; i < end; i++) {
    const byte = bytes[i] ?? 0;
    text +=
      byte >= 0x20 && byte < 0x7f && byte !== 0x5c
        ? String.fromCharCode(byte)
        : `\\x${byte.toString(16).padStart(2, '0')}`;
  }
  return text;
}

/** Reads an own property along a dot path; inherited properties such as "constructor" are not fields. */
function readPath(source: object, path: string): unknown {
  let current: unknown = source;
  for (const key of path.split('.')) {
    if (typeof current !== 'object' || current === null || !Object.hasOwn(current, key)) {
      return undefined;
    }
    current = (current as Record<string, unknown>)[key];
  }
  return current;
}

const utf8 = new TextDecoder('utf-8', { fatal: true });
const lossyUtf8 = new TextDecoder('utf-8');

/**
 * Turns one MQTT message into samples. Never throws: a payload that cannot be read at all becomes
 * one rejection holding the payload; in a JSON array each element is judged on its own.
 */
export function parseMqttMessage(
  spec: SubscriptionSpec,
  topic: string,
  payload: Uint8Array,
  ctx: MqttMessageContext,
): ParsedSamples {
  const samples: SampleInput[] = [];
  const rejected: QuarantineInput[] = [];
  const source = `mqtt:${topic}`;
  const base = { source, receivedAt: ctx.receivedAt };

  if (payload.length > ctx.maxPayloadBytes) {
    const raw = lossyUtf8.decode(payload.subarray(0, RAW_LIMIT_BYTES));
    const reason = `the payload is ${payload.length} bytes; at most ${ctx.maxPayloadBytes} are allowed.`;
    rejected.push(buildRejection({ ...base, raw }, 'PAYLOAD_TOO_LARGE', reason, null));
    return { samples, rejected };
  }
  let text: string;
  try {
    text = utf8.decode(payload);
  } catch {
    const reason = 'the payload is not valid UTF-8 text; the raw field shows its bytes.';
    rejected.push(
      buildRejection({ ...base, raw: showBytes(payload) }, 'PAYLOAD_NOT_UTF8', reason, null),
    );
    return { samples, rejected };
  }

  const levels = matchTopic(spec.filter, topic);
  const tag = levels === null ? null : tagFromTopic(spec.tag, levels, spec.filter);
  if (tag === null) {
    const reason =
      levels === null
        ? `the topic ${showValue(topic)} does not match the filter ${JSON.stringify(spec.filter)}, so it names no tag.`
        : `the tag template ${JSON.stringify(spec.tag)} refers to topic levels that ${showValue(topic)} does not have.`;
    rejected.push(buildRejection({ ...base, raw: text }, 'TAG_NAME_INVALID', reason, null));
    return { samples, rejected };
  }

  const keep = (result: ReturnType<typeof checkSample>): void => {
    if (result.ok) samples.push(result.sample);
    else rejected.push(result.rejection);
  };

  if (spec.format === 'number') {
    const trimmed = text.trim();
    if (trimmed === '') {
      // An empty message is how MQTT clears a retained message; it carries no sample either way.
      const reason = 'the payload is empty, so it holds no value.';
      rejected.push(buildRejection({ ...base, raw: text }, 'VALUE_NOT_NUMBER', reason, tag));
      return { samples, rejected };
    }
    const value = trimmed === 'null' ? null : trimmed;
    const ctxLive: SampleContext = { ...ctx, ...base, raw: text, timeDefaultsToReceive: true };
    keep(checkSample({ tag, t: undefined, value }, ctxLive));
    return { samples, rejected };
  }

  let parsed: unknown;
  try {
    parsed = JSON.parse(text);
  } catch (error) {
    const detail = error instanceof Error ? ` (${error.message})` : '';
    const reason = `the payload is not valid JSON${detail}.`;
    rejected.push(buildRejection({ ...base, raw: text }, 'PAYLOAD_NOT_JSON', reason, tag));
    return { samples, rejected };
  }

  const valuePath = spec.valueField ?? 'value';
  const timePath = spec.timeField ?? 'time';
  const qualityPath = spec.qualityField ?? 'quality';
  const fieldPaths = { value: valuePath, time: timePath, quality: qualityPath };
  const timeUnit = spec.timeUnit ?? 'ms';
  const candidateOf = (item: object) => ({
    tag,
    t: readPath(item, timePath),
    value: readPath(item, valuePath),
    quality: readPath(item, qualityPath),
  });

  if (typeof parsed === 'object' && parsed !== null && !Array.isArray(parsed)) {
    const live: SampleContext = {
      ...ctx,
      ...base,
      raw: text,
      timeDefaultsToReceive: true,
      timeUnit,
      fieldPaths,
    };
    keep(checkSample(candidateOf(parsed), live));
    return { samples, rejected };
  }

  if (!Array.isArray(parsed)) {
    const reason = `the JSON payload is ${kindOf(parsed)}, but this subscription expects an object with a ${JSON.stringify(valuePath)} field, or an array of them${typeof parsed === 'number' ? ' (a bare number needs format "number")' : ''}.`;
    rejected.push(buildRejection({ ...base, raw: text }, 'PAYLOAD_SHAPE', reason, tag));
    return { samples, rejected };
  }
  if (parsed.length === 0) {
    const reason = 'the payload is an empty JSON array, so it holds no samples.';
    rejected.push(buildRejection({ ...base, raw: text }, 'PAYLOAD_SHAPE', reason, tag));
    return { samples, rejected };
  }
  for (let i = 0; i < parsed.length; i++) {
    const item: unknown = parsed[i];
    const element: SampleContext = {
      ...ctx,
      ...base,
      raw: rawOf(item),
      timeUnit,
      fieldPaths,
      reasonPrefix: `At index ${i}: `,
    };
    if (typeof item !== 'object' || item === null || Array.isArray(item)) {
      const reason = `the element is ${kindOf(item)}, not an object with a ${JSON.stringify(valuePath)} field.`;
      rejected.push(buildRejection(element, 'PAYLOAD_SHAPE', reason, tag));
      continue;
    }
    const candidate = candidateOf(item);
    if (candidate.t === undefined || candidate.t === null) {
      const reason = `the time (field ${JSON.stringify(timePath)}) is missing; every element of an array is a backfill sample, which needs its own time.`;
      rejected.push(buildRejection(element, 'TIME_MISSING', reason, tag));
      continue;
    }
    keep(checkSample(candidate, element));
  }
  return { samples, rejected };
}
