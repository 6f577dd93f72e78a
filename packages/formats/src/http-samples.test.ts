import { describe, expect, it } from 'vitest';
import { type HttpSamplesContext, parseHttpSamples } from './http-samples.js';

const NOW = Date.UTC(2026, 2, 1, 12);
const RECEIVED = NOW - 2;
const T = Date.UTC(2026, 2, 1, 11);
const ctx: HttpSamplesContext = {
  receivedAt: RECEIVED,
  now: NOW,
  maxFutureMs: 60_000,
  maxSamples: 5,
};

describe('parseHttpSamples', () => {
  it('reads tag, time or t, value and quality from each element', () => {
    const body: unknown = JSON.parse(
      JSON.stringify([
        { tag: 'FI-101', time: '2026-03-01T11:00:00Z', value: 1.5 },
        { tag: 'FI-101', t: T + 1000, value: '2', quality: 64 },
        { tag: 'TI-7', time: T, value: null },
      ]),
    );
    expect(parseHttpSamples(body, ctx)).toEqual({
      samples: [
        { tag: 'FI-101', t: T, value: 1.5, quality: 192, source: 'http', receivedAt: RECEIVED },
        { tag: 'FI-101', t: T + 1000, value: 2, quality: 64, source: 'http', receivedAt: RECEIVED },
        { tag: 'TI-7', t: T, value: null, quality: 0, source: 'http', receivedAt: RECEIVED },
      ],
      rejected: [],
    });
  });

  it('judges each element on its own and says which one is wrong', () => {
    const body = [
      { tag: 'a', value: 1 },
      { tag: 'a', time: T, t: T, value: 1 },
      { time: T, value: 1 },
      { tag: 7, time: T, value: 1 },
      'a,1,2',
      { tag: 'a', time: T, value: 'high' },
      { tag: 'ok', time: T, value: 3 },
    ];
    const { samples, rejected } = parseHttpSamples(body, { ...ctx, maxSamples: 100 });
    expect(samples.map((s) => s.tag)).toEqual(['ok']);
    expect(rejected.map((r) => [r.code, r.reason, r.tag, r.raw])).toEqual([
      ['TIME_MISSING', 'At index 0: the time is missing.', 'a', '{"tag":"a","value":1}'],
      [
        'PAYLOAD_SHAPE',
        'At index 1: both "time" and "t" are given; give the time once.',
        'a',
        `{"tag":"a","time":${T},"t":${T},"value":1}`,
      ],
      ['TAG_NAME_INVALID', 'At index 2: the tag is missing.', null, `{"time":${T},"value":1}`],
      [
        'TAG_NAME_INVALID',
        'At index 3: the tag is a number, not a string.',
        null,
        `{"tag":7,"time":${T},"value":1}`,
      ],
      [
        'PAYLOAD_SHAPE',
        'At index 4: the element is a string, not an object with tag, time and value.',
        null,
        '"a,1,2"',
      ],
      [
        'VALUE_NOT_NUMBER',
        'At index 5: the value "high" is not a number.',
        'a',
        `{"tag":"a","time":${T},"value":"high"}`,
      ],
    ]);
    expect(rejected.every((r) => r.source === 'http' && r.receivedAt === RECEIVED)).toBe(true);
  });

  it('refuses a body that is not an array, is empty or is too long, as one rejection', () => {
    const one = (body: unknown) => {
      const { samples, rejected } = parseHttpSamples(body, ctx);
      expect(samples).toEqual([]);
      return rejected.map((r) => [r.code, r.reason, r.raw]);
    };
    expect(one({ tag: 'a', time: T, value: 1 })).toEqual([
      [
        'PAYLOAD_SHAPE',
        'The body is an object; it must be a JSON array of samples, each { "tag", "time", "value", "quality"? }.',
        `{"tag":"a","time":${T},"value":1}`,
      ],
    ]);
    expect(one([])).toEqual([
      ['PAYLOAD_SHAPE', 'The body is an empty array, so it holds no samples.', '[]'],
    ]);
    const long = Array.from({ length: 6 }, (_, i) => ({ tag: 'a', time: T + i, value: i }));
    expect(one(long)).toEqual([
      [
        'PAYLOAD_TOO_LARGE',
        'The body holds 6 samples; at most 5 are allowed in one request (raw shows the first 6).',
        JSON.stringify(long),
      ],
    ]);
  });

  it('does not take inherited properties for fields', () => {
    const body = [Object.assign(Object.create({ value: 1 }) as object, { tag: 'a', time: T })];
    expect(parseHttpSamples(body, ctx).rejected.map((r) => r.reason)).toEqual([
      'At index 0: the value is missing.',
    ]);
  });

  it('applies the valid range', () => {
    const ranged = { ...ctx, validRange: () => ({ min: 0, max: null }) };
    const { rejected } = parseHttpSamples([{ tag: 'a', time: T, value: -1 }], ranged);
    expect(rejected.map((r) => [r.code, r.reason])).toEqual([
      ['VALUE_OUT_OF_RANGE', 'At index 0: the value -1 is below the valid minimum 0 of tag "a".'],
    ]);
  });

  it('copes with bodies that cannot be written back as JSON', () => {
    const cyclic: unknown[] = [];
    cyclic.push(cyclic);
    const { rejected } = parseHttpSamples([cyclic, { tag: 'a', time: T, value: 10n }], {
      ...ctx,
      maxSamples: 10,
    });
    expect(rejected.map((r) => [r.code, r.reason, r.raw])).toEqual([
      [
        'PAYLOAD_SHAPE',
        'At index 0: the element is an array, not an object with tag, time and value.',
        'an array',
      ],
      ['VALUE_NOT_NUMBER', 'At index 1: the value is a bigint, not a number.', 'an object'],
    ]);
  });
});
