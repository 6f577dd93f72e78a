import type { QuarantineInput, SampleInput } from '@trueshift/store';
import {
  buildRejection,
  checkSample,
  kindOf,
  type ParsedSamples,
  rawOf,
  type SampleContext,
} from './sample-checks.js';

export interface HttpSamplesContext {
  receivedAt: number;
  now: number;
  maxFutureMs: number;
  /** The most samples one request may carry; a longer batch is refused whole. */
  maxSamples: number;
  validRange?: SampleContext['validRange'];
}

const SOURCE = 'http';
// A refused batch keeps only its start as raw: enough to recognise it, bounded in cost.
const PREVIEW_ELEMENTS = 100;

/**
 * Reads the body of the HTTP batch endpoint: a JSON array of { tag, time | t, value, quality? }.
 * Every element needs its own time (epoch milliseconds or ISO 8601): a batch is sent after the
 * fact, so the receive time says nothing about when a value was measured. Elements are judged one by
 * one; a body that is not an array, is empty, or is longer than `maxSamples` is one rejection.
 */
export function parseHttpSamples(body: unknown, ctx: HttpSamplesContext): ParsedSamples {
  const samples: SampleInput[] = [];
  const rejected: QuarantineInput[] = [];
  const whole = { source: SOURCE, receivedAt: ctx.receivedAt };

  if (!Array.isArray(body)) {
    const reason = `the body is ${kindOf(body)}; it must be a JSON array of samples, each { "tag", "time", "value", "quality"? }.`;
    rejected.push(buildRejection({ ...whole, raw: rawOf(body) }, 'PAYLOAD_SHAPE', reason, null));
    return { samples, rejected };
  }
  if (body.length === 0) {
    const reason = 'the body is an empty array, so it holds no samples.';
    rejected.push(buildRejection({ ...whole, raw: '[]' }, 'PAYLOAD_SHAPE', reason, null));
    return { samples, rejected };
  }
  if (body.length > ctx.maxSamples) {
    const raw = rawOf(body.slice(0, PREVIEW_ELEMENTS));
    const reason = `the body holds ${body.length} samples; at most ${ctx.maxSamples} are allowed in one request (raw shows the first ${Math.min(PREVIEW_ELEMENTS, body.length)}).`;
    rejected.push(buildRejection({ ...whole, raw }, 'PAYLOAD_TOO_LARGE', reason, null));
    return { samples, rejected };
  }

  for (let i = 0; i < body.length; i++) {
    const item: unknown = body[i];
    const element: SampleContext = {
      source: SOURCE,
      raw: rawOf(item),
      receivedAt: ctx.receivedAt,
      now: ctx.now,
      maxFutureMs: ctx.maxFutureMs,
      validRange: ctx.validRange,
      reasonPrefix: `At index ${i}: `,
    };
    if (typeof item !== 'object' || item === null || Array.isArray(item)) {
      const reason = `the element is ${kindOf(item)}, not an object with tag, time and value.`;
      rejected.push(buildRejection(element, 'PAYLOAD_SHAPE', reason, null));
      continue;
    }
    const fields = item as Record<string, unknown>;
    const own = (key: string): unknown => (Object.hasOwn(fields, key) ? fields[key] : undefined);
    const tag = own('tag');
    if (typeof tag !== 'string') {
      const reason =
        tag === undefined ? 'the tag is missing.' : `the tag is ${kindOf(tag)}, not a string.`;
      rejected.push(buildRejection(element, 'TAG_NAME_INVALID', reason, null));
      continue;
    }
    const time = own('time');
    const t = own('t');
    if (time !== undefined && t !== undefined) {
      const reason = 'both "time" and "t" are given; give the time once.';
      rejected.push(buildRejection(element, 'PAYLOAD_SHAPE', reason, tag));
      continue;
    }
    const result = checkSample(
      { tag, t: time ?? t, value: own('value'), quality: own('quality') },
      element,
    );
    if (result.ok) samples.push(result.sample);
    else rejected.push(result.rejection);
  }
  return { samples, rejected };
}
