import type { ErrorCode } from '@trueshift/errors';
import type { QuarantineInput, SampleInput } from '@trueshift/store';
import { QUALITY_BAD, QUALITY_GOOD } from '@trueshift/store';
import { looksLikeIsoTime, parseIsoTime } from './iso-time.js';

/** The longest raw input kept with a rejection, in UTF-8 bytes. */
export const RAW_LIMIT_BYTES = 64 * 1024;
export const TAG_NAME_MAX_LENGTH = 200;
export const QUALITY_MAX = 65_535;

/** What a source tells the checks besides the candidate itself. */
export interface SampleContext {
  /** Where the sample came from, e.g. "mqtt:plant/evap1/steam", "csv:drop.csv:17", "http". */
  source: string;
  /** The input as received, kept with a rejection. */
  raw: string;
  receivedAt: number;
  now: number;
  /** Samples stamped later than now + maxFutureMs are refused: the sender's clock is wrong. */
  maxFutureMs: number;
  validRange?: (tag: string) => { min: number | null; max: number | null } | undefined;
  /** A live source may leave the time out and mean "now"; for any other source that is an error. */
  timeDefaultsToReceive?: boolean;
  /** How a numeric time is counted; ISO 8601 text is read as written. Default 'ms'. */
  timeUnit?: 'ms' | 's';
  /** Where each field was found (e.g. a JSON dot path), named in reasons. */
  fieldPaths?: { time?: string; value?: string; quality?: string };
  /** Put before every reason, e.g. "At index 3: ", when one input holds many samples. */
  reasonPrefix?: string;
}

export interface SampleCandidate {
  tag: string;
  t: unknown;
  value: unknown;
  quality?: unknown;
}

/** What a parser hands on from one input: the samples it accepted and the rejections. */
export interface ParsedSamples {
  samples: SampleInput[];
  rejected: QuarantineInput[];
}

export type SampleCheck =
  { ok: true; sample: SampleInput } | { ok: false; rejection: QuarantineInput };

export type TimeCheck = { ok: true; t: number } | { ok: false; code: ErrorCode; reason: string };

// Epoch times below this (1973-03-03) are almost always seconds sent where milliseconds belong.
const EPOCH_MS_FLOOR = 1e11;
// The range of ECMAScript dates; anything outside cannot be shown or stored as a time.
const DATE_LIMIT_MS = 8.64e15;
const DECIMAL = /^[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?$/;
const NOT_FINITE_WORDS = /^[+-]?(?:nan|inf|infinity)$/i;
const DECIMAL_COMMA = /^[+-]?\d+,\d+$/;
const INTEGER = /^[+-]?\d+$/;
// eslint-disable-next-line no-control-regex -- finding control characters is the point.
const CONTROL = /[\u0000-\u001f\u007f-\u009f]/;
const LONE_SURROGATE = /\p{Cs}/u;
// Control characters, wildcards and any surrogate (paired or not): the few names needing a closer look.
// eslint-disable-next-line no-control-regex -- as above.
const ODD_TAG_CHARACTER = /[\u0000-\u001f\u007f-\u009f+#\ud800-\udfff]/;
const SHOWN_LENGTH = 80;

const encoder = new TextEncoder();

/** Cuts raw input to at most RAW_LIMIT_BYTES of UTF-8 without splitting a character. */
export function cutRaw(raw: string): string {
  // A UTF-16 code unit never takes more than 3 bytes of UTF-8, so short text needs no encoding.
  if (raw.length * 3 <= RAW_LIMIT_BYTES) return raw;
  const { read } = encoder.encodeInto(raw, new Uint8Array(RAW_LIMIT_BYTES));
  return read >= raw.length ? raw : raw.slice(0, read);
}

/** A value as a reason shows it: quoted text (shortened), numbers as written, other kinds by name. */
export function showValue(value: unknown): string {
  if (typeof value === 'string') {
    const short =
      value.length > SHOWN_LENGTH
        ? `${value.slice(0, SHOWN_LENGTH).replace(/\p{Cs}$/u, '')}…`
        : value;
    return JSON.stringify(short);
  }
  if (typeof value === 'number' || typeof value === 'boolean' || typeof value === 'bigint') {
    return String(value);
  }
  return kindOf(value);
}

/** A received value as text for a rejection's raw field: JSON where it can be written as JSON. */
export function rawOf(value: unknown): string {
  try {
    const json = JSON.stringify(value) as string | undefined;
    if (json !== undefined) return json;
  } catch {
    // Cyclic, BigInt or very deeply nested values cannot be written as JSON; name their kind instead.
  }
  return showValue(value);
}

/** The kind of a received value, as reasons name it: "an object", "a string", "null". */
export function kindOf(value: unknown): string {
  if (value === null) return 'null';
  if (value === undefined) return 'nothing';
  if (Array.isArray(value)) return 'an array';
  if (typeof value === 'object') return 'an object';
  return `a ${typeof value}`;
}

function finishReason(body: string, prefix: string | undefined): string {
  if (prefix !== undefined && prefix !== '') return `${prefix}${body}`;
  return body.charAt(0).toUpperCase() + body.slice(1);
}

/** Builds a rejection the way every source does: raw cut to the limit, reason as a sentence. */
export function buildRejection(
  ctx: Pick<SampleContext, 'source' | 'raw' | 'receivedAt' | 'reasonPrefix'>,
  code: ErrorCode,
  reason: string,
  tag: string | null,
): QuarantineInput {
  return {
    source: ctx.source,
    raw: cutRaw(ctx.raw),
    reason: finishReason(reason, ctx.reasonPrefix),
    code,
    tag,
    receivedAt: ctx.receivedAt,
  };
}

/** Why a tag name cannot be used, or null when it can. */
export function tagNameProblem(tag: string): string | null {
  if (tag === '') return 'the tag name is empty.';
  if (tag.length > TAG_NAME_MAX_LENGTH) {
    return `the tag name ${showValue(tag)} is ${tag.length} characters long; at most ${TAG_NAME_MAX_LENGTH} are allowed.`;
  }
  // One scan for the common case of a good name; the reason is worked out only for a bad one.
  if (!ODD_TAG_CHARACTER.test(tag) && tag.trim() === tag) return null;
  if (CONTROL.test(tag)) return `the tag name ${showValue(tag)} contains a control character.`;
  if (tag.includes('+') || tag.includes('#')) {
    return `the tag name ${showValue(tag)} contains an MQTT wildcard ("+" or "#").`;
  }
  if (tag.trim() !== tag) return `the tag name ${showValue(tag)} starts or ends with white space.`;
  if (LONE_SURROGATE.test(tag)) return `the tag name ${showValue(tag)} is not valid Unicode.`;
  return null;
}

type Field = 'time' | 'value' | 'quality';
type Labelled = Pick<SampleContext, 'fieldPaths'>;

/**
 * A field as reasons name it: "the value", "the value 12", "the value "x" (field "pv.val")". Built
 * only when a reason is written, so accepted samples pay nothing for it.
 */
function named(field: Field, ctx: Labelled, shown?: string): string {
  const path = ctx.fieldPaths?.[field];
  const head = shown === undefined ? `the ${field}` : `the ${field} ${shown}`;
  return path === undefined ? head : `${head} (field ${JSON.stringify(path)})`;
}

/**
 * Reads and checks a sample time: epoch milliseconds (or seconds, by `timeUnit`) as a number or
 * decimal text, or ISO 8601 text. Exported so a source with one time for many samples (a wide CSV
 * row) reads it once.
 */
export function checkTime(
  t: unknown,
  ctx: Pick<
    SampleContext,
    'receivedAt' | 'now' | 'maxFutureMs' | 'timeDefaultsToReceive' | 'timeUnit' | 'fieldPaths'
  >,
): TimeCheck {
  const text = typeof t === 'string' ? t.trim() : undefined;
  if (t === undefined || t === null || text === '') {
    if (ctx.timeDefaultsToReceive === true) return { ok: true, t: ctx.receivedAt };
    return { ok: false, code: 'TIME_MISSING', reason: `${named('time', ctx)} is missing.` };
  }
  let ms: number;
  if (typeof t === 'number' || (text !== undefined && DECIMAL.test(text))) {
    const counted = typeof t === 'number' ? t : Number(text);
    if (!Number.isFinite(counted)) {
      const reason = `${named('time', ctx, showValue(t))} is not a finite number.`;
      return { ok: false, code: 'TIME_UNREADABLE', reason };
    }
    const seconds = ctx.timeUnit === 's';
    // Epoch times are whole milliseconds; rounding also removes float noise from seconds × 1000.
    ms = Math.round(seconds ? counted * 1000 : counted);
    if (Math.abs(ms) > DATE_LIMIT_MS) {
      const reason = `${named('time', ctx, showValue(t))} is outside the range of dates.`;
      return { ok: false, code: 'TIME_UNREADABLE', reason };
    }
    if (ms < EPOCH_MS_FLOOR) {
      const unit = seconds ? 'seconds' : 'milliseconds';
      const ending = seconds ? '.' : '; is it in seconds?';
      const reason = `${named('time', ctx, showValue(t))} read as epoch ${unit} is ${new Date(ms).toISOString()}, before 1973${ending}`;
      return { ok: false, code: 'TIME_UNREADABLE', reason };
    }
  } else if (text !== undefined) {
    ms = parseIsoTime(text);
    if (Number.isNaN(ms)) {
      const shown = named('time', ctx, showValue(text));
      const reason = looksLikeIsoTime(text)
        ? `${shown} is not a date and time that exists.`
        : `${shown} is neither epoch milliseconds nor an ISO 8601 time.`;
      return { ok: false, code: 'TIME_UNREADABLE', reason };
    }
  } else {
    const reason = `${named('time', ctx)} is ${kindOf(t)}, not epoch milliseconds or an ISO 8601 time.`;
    return { ok: false, code: 'TIME_UNREADABLE', reason };
  }
  const latest = ctx.now + ctx.maxFutureMs;
  if (ms > latest) {
    const reason = `${named('time', ctx, showValue(t))} is ${new Date(ms).toISOString()}, later than now plus ${ctx.maxFutureMs} ms (${new Date(latest).toISOString()}).`;
    return { ok: false, code: 'TIME_IN_FUTURE', reason };
  }
  return { ok: true, t: ms };
}

type ValueCheck =
  { ok: true; value: number | null } | { ok: false; code: ErrorCode; reason: string };

function checkValue(value: unknown, ctx: Labelled): ValueCheck {
  if (typeof value === 'number') {
    if (Number.isFinite(value)) return { ok: true, value };
    const reason = `${named('value', ctx, String(value))} is not a finite number.`;
    return { ok: false, code: 'VALUE_NOT_FINITE', reason };
  }
  if (value === null) return { ok: true, value: null };
  if (typeof value === 'string') {
    const text = value.trim();
    if (text === '') {
      return { ok: false, code: 'VALUE_NOT_NUMBER', reason: `${named('value', ctx)} is empty.` };
    }
    if (DECIMAL.test(text)) {
      const number = Number(text);
      if (Number.isFinite(number)) return { ok: true, value: number };
    }
    const shown = named('value', ctx, showValue(value));
    if (DECIMAL.test(text) || NOT_FINITE_WORDS.test(text)) {
      return { ok: false, code: 'VALUE_NOT_FINITE', reason: `${shown} is not a finite number.` };
    }
    const hint = DECIMAL_COMMA.test(text) ? ' (a decimal comma is not read; write a point)' : '';
    return { ok: false, code: 'VALUE_NOT_NUMBER', reason: `${shown} is not a number${hint}.` };
  }
  if (value === undefined) {
    return { ok: false, code: 'VALUE_NOT_NUMBER', reason: `${named('value', ctx)} is missing.` };
  }
  const shown =
    typeof value === 'boolean' ? named('value', ctx, String(value)) : named('value', ctx);
  return {
    ok: false,
    code: 'VALUE_NOT_NUMBER',
    reason: `${shown} is ${kindOf(value)}, not a number.`,
  };
}

type QualityCheck = { ok: true; quality: number | undefined } | { ok: false; reason: string };

function checkQuality(quality: unknown, ctx: Labelled): QualityCheck {
  if (quality === undefined || quality === null) return { ok: true, quality: undefined };
  let number = Number.NaN;
  if (typeof quality === 'number') number = quality;
  else if (typeof quality === 'string' && INTEGER.test(quality.trim())) number = Number(quality);
  if (Number.isInteger(number) && number >= 0 && number <= QUALITY_MAX) {
    return { ok: true, quality: number };
  }
  const shown =
    typeof quality === 'object'
      ? `${named('quality', ctx)} (${kindOf(quality)})`
      : named('quality', ctx, showValue(quality));
  return {
    ok: false,
    reason: `${shown} is not an integer from 0 to ${QUALITY_MAX} (OPC style; ${QUALITY_GOOD} is good).`,
  };
}

/**
 * Judges one candidate sample, the same way for every source. Checks, in order: the tag name, the
 * time, the value, the quality, then the tag's valid range (only for good quality: a bad-quality
 * reading is expected to be off-scale, and is kept as the source sent it).
 */
export function checkSample(candidate: SampleCandidate, ctx: SampleContext): SampleCheck {
  const tagProblem = tagNameProblem(candidate.tag);
  if (tagProblem !== null) return rejectTag(tagProblem, ctx);
  const time = checkTime(candidate.t, ctx);
  if (!time.ok) {
    return { ok: false, rejection: buildRejection(ctx, time.code, time.reason, candidate.tag) };
  }
  return checkReading(candidate, time.t, ctx);
}

function rejectTag(problem: string, ctx: SampleContext): SampleCheck {
  // An unusable name is not stored as a tag; the raw input still shows it.
  return { ok: false, rejection: buildRejection(ctx, 'TAG_NAME_INVALID', problem, null) };
}

/**
 * checkSample for a time already read by checkTime, for sources with one time for many samples
 * (a wide CSV row), so the time is read once and reported once.
 */
export function checkSampleAt(
  candidate: Omit<SampleCandidate, 't'>,
  t: number,
  ctx: SampleContext,
): SampleCheck {
  const tagProblem = tagNameProblem(candidate.tag);
  if (tagProblem !== null) return rejectTag(tagProblem, ctx);
  return checkReading(candidate, t, ctx);
}

function checkReading(
  candidate: Omit<SampleCandidate, 't'>,
  t: number,
  ctx: SampleContext,
): SampleCheck {
  const { tag } = candidate;
  const value = checkValue(candidate.value, ctx);
  if (!value.ok) {
    return { ok: false, rejection: buildRejection(ctx, value.code, value.reason, tag) };
  }
  const quality = checkQuality(candidate.quality, ctx);
  if (!quality.ok) {
    return { ok: false, rejection: buildRejection(ctx, 'QUALITY_INVALID', quality.reason, tag) };
  }
  const q = quality.quality ?? (value.value === null ? QUALITY_BAD : QUALITY_GOOD);
  if (value.value !== null && q >= QUALITY_GOOD && ctx.validRange !== undefined) {
    const range = ctx.validRange(tag);
    const min = range?.min ?? null;
    const max = range?.max ?? null;
    const v = value.value;
    let reason: string | null = null;
    if (min !== null && v < min) {
      reason = `${named('value', ctx, String(v))} is below the valid minimum ${min} of tag ${showValue(tag)}.`;
    } else if (max !== null && v > max) {
      reason = `${named('value', ctx, String(v))} is above the valid maximum ${max} of tag ${showValue(tag)}.`;
    }
    if (reason !== null) {
      return { ok: false, rejection: buildRejection(ctx, 'VALUE_OUT_OF_RANGE', reason, tag) };
    }
  }
  return {
    ok: true,
    sample: {
      tag,
      t,
      value: value.value,
      quality: q,
      source: ctx.source,
      receivedAt: ctx.receivedAt,
    },
  };
}
