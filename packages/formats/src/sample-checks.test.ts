import { describe, expect, it } from 'vitest';
import type { QuarantineInput, SampleInput } from '@trueshift/store';
import {
  buildRejection,
  checkSample,
  checkTime,
  cutRaw,
  RAW_LIMIT_BYTES,
  type SampleContext,
  showValue,
  tagNameProblem,
} from './sample-checks.js';

const NOW = Date.UTC(2026, 2, 1, 12);
const RECEIVED = NOW - 5;
const T = Date.UTC(2026, 2, 1, 11);

function context(extra: Partial<SampleContext> = {}): SampleContext {
  return {
    source: 'test',
    raw: 'raw input',
    receivedAt: RECEIVED,
    now: NOW,
    maxFutureMs: 60_000,
    ...extra,
  };
}

function accepted(candidate: Parameters<typeof checkSample>[0], ctx = context()): SampleInput {
  const result = checkSample(candidate, ctx);
  if (!result.ok) throw new Error(`expected a sample, got: ${result.rejection.reason}`);
  return result.sample;
}

function rejected(candidate: Parameters<typeof checkSample>[0], ctx = context()): QuarantineInput {
  const result = checkSample(candidate, ctx);
  if (result.ok) throw new Error('expected a rejection');
  return result.rejection;
}

describe('checkSample: values', () => {
  it('takes finite numbers and decimal text', () => {
    expect(accepted({ tag: 'FI-101', t: T, value: 12.5 })).toEqual({
      tag: 'FI-101',
      t: T,
      value: 12.5,
      quality: 192,
      source: 'test',
      receivedAt: RECEIVED,
    });
    expect(accepted({ tag: 'a', t: T, value: '12.5' }).value).toBe(12.5);
    expect(accepted({ tag: 'a', t: T, value: ' -1e3 ' }).value).toBe(-1000);
    expect(accepted({ tag: 'a', t: T, value: '.5' }).value).toBe(0.5);
    expect(accepted({ tag: 'a', t: T, value: '+7.' }).value).toBe(7);
  });

  it('keeps an explicit null as a sample with bad quality unless a quality is given', () => {
    const missing = accepted({ tag: 'a', t: T, value: null });
    expect(missing.value).toBeNull();
    expect(missing.quality).toBe(0);
    expect(accepted({ tag: 'a', t: T, value: null, quality: 24 }).quality).toBe(24);
  });

  it('refuses values that are not finite numbers, naming the value', () => {
    const cases: [unknown, string, string][] = [
      [Number.NaN, 'VALUE_NOT_FINITE', 'The value NaN is not a finite number.'],
      [Number.POSITIVE_INFINITY, 'VALUE_NOT_FINITE', 'The value Infinity is not a finite number.'],
      ['NaN', 'VALUE_NOT_FINITE', 'The value "NaN" is not a finite number.'],
      ['-inf', 'VALUE_NOT_FINITE', 'The value "-inf" is not a finite number.'],
      ['1e999', 'VALUE_NOT_FINITE', 'The value "1e999" is not a finite number.'],
      ['abc', 'VALUE_NOT_NUMBER', 'The value "abc" is not a number.'],
      ['0x1A', 'VALUE_NOT_NUMBER', 'The value "0x1A" is not a number.'],
      [
        '12,5',
        'VALUE_NOT_NUMBER',
        'The value "12,5" is not a number (a decimal comma is not read; write a point).',
      ],
      ['', 'VALUE_NOT_NUMBER', 'The value is empty.'],
      [undefined, 'VALUE_NOT_NUMBER', 'The value is missing.'],
      [true, 'VALUE_NOT_NUMBER', 'The value true is a boolean, not a number.'],
      [{ v: 1 }, 'VALUE_NOT_NUMBER', 'The value is an object, not a number.'],
      [[1], 'VALUE_NOT_NUMBER', 'The value is an array, not a number.'],
    ];
    for (const [value, code, reason] of cases) {
      const rejection = rejected({ tag: 'a', t: T, value });
      expect(rejection.code, String(value)).toBe(code);
      expect(rejection.reason).toBe(reason);
    }
  });

  it('names the field a value was read from', () => {
    const ctx = context({ fieldPaths: { value: 'pv.val' } });
    expect(rejected({ tag: 'a', t: T, value: 'abc' }, ctx).reason).toBe(
      'The value "abc" (field "pv.val") is not a number.',
    );
    expect(rejected({ tag: 'a', t: T, value: undefined }, ctx).reason).toBe(
      'The value (field "pv.val") is missing.',
    );
  });
});

describe('checkSample: times', () => {
  it('reads epoch milliseconds as a number or as decimal text, and ISO 8601 as UTC without a zone', () => {
    expect(accepted({ tag: 'a', t: T, value: 1 }).t).toBe(T);
    expect(accepted({ tag: 'a', t: String(T), value: 1 }).t).toBe(T);
    expect(accepted({ tag: 'a', t: '2026-03-01T11:00:00Z', value: 1 }).t).toBe(T);
    expect(accepted({ tag: 'a', t: '2026-03-01 11:00', value: 1 }).t).toBe(T);
    expect(accepted({ tag: 'a', t: '2026-03-01T12:00:00+01:00', value: 1 }).t).toBe(T);
    expect(accepted({ tag: 'a', t: T + 0.6, value: 1 }).t).toBe(T + 1);
  });

  it('reads epoch seconds when the source says so', () => {
    const ctx = context({ timeUnit: 's' });
    expect(accepted({ tag: 'a', t: T / 1000 + 0.001, value: 1 }, ctx).t).toBe(T + 1);
    expect(accepted({ tag: 'a', t: '2026-03-01T11:00:00Z', value: 1 }, ctx).t).toBe(T);
  });

  it('uses the receive time for a missing time only when the source allows it', () => {
    const missing = rejected({ tag: 'a', t: undefined, value: 1 });
    expect(missing.code).toBe('TIME_MISSING');
    expect(missing.reason).toBe('The time is missing.');
    expect(rejected({ tag: 'a', t: null, value: 1 }).code).toBe('TIME_MISSING');
    expect(rejected({ tag: 'a', t: ' ', value: 1 }).code).toBe('TIME_MISSING');
    const live = context({ timeDefaultsToReceive: true });
    expect(accepted({ tag: 'a', t: undefined, value: 1 }, live).t).toBe(RECEIVED);
  });

  it('refuses times it cannot read, naming the time', () => {
    const cases: [unknown, string][] = [
      ['yesterday', 'The time "yesterday" is neither epoch milliseconds nor an ISO 8601 time.'],
      [
        '2026-02-30T00:00:00Z',
        'The time "2026-02-30T00:00:00Z" is not a date and time that exists.',
      ],
      [Number.NaN, 'The time NaN is not a finite number.'],
      [1e300, 'The time 1e+300 is outside the range of dates.'],
      [
        1_767_225_600,
        'The time 1767225600 read as epoch milliseconds is 1970-01-21T10:53:45.600Z, before 1973; is it in seconds?',
      ],
      [true, 'The time is a boolean, not epoch milliseconds or an ISO 8601 time.'],
      [{}, 'The time is an object, not epoch milliseconds or an ISO 8601 time.'],
    ];
    for (const [t, reason] of cases) {
      const rejection = rejected({ tag: 'a', t, value: 1 });
      expect(rejection.code).toBe('TIME_UNREADABLE');
      expect(rejection.reason).toBe(reason);
    }
  });

  it('refuses a time beyond now plus the allowed lead, and takes one just inside it', () => {
    expect(accepted({ tag: 'a', t: NOW + 60_000, value: 1 }).t).toBe(NOW + 60_000);
    const late = rejected({ tag: 'a', t: '2026-03-01T12:01:00.001Z', value: 1 });
    expect(late.code).toBe('TIME_IN_FUTURE');
    expect(late.reason).toBe(
      'The time "2026-03-01T12:01:00.001Z" is 2026-03-01T12:01:00.001Z, later than now plus 60000 ms (2026-03-01T12:01:00.000Z).',
    );
  });

  it('is exported for sources that read one time for many samples', () => {
    expect(checkTime('2026-03-01T11:00:00Z', context())).toEqual({ ok: true, t: T });
    expect(checkTime('', context({ fieldPaths: { time: 'ts' } }))).toEqual({
      ok: false,
      code: 'TIME_MISSING',
      reason: 'the time (field "ts") is missing.',
    });
  });
});

describe('checkSample: quality', () => {
  it('defaults to 192 and takes OPC-style integers 0..65535', () => {
    // OPC DA quality flags: 0xC0 = 192 is "good, non-specific", 0 is "bad" (OPC Data Access
    // specification, quality flags; from memory). Treating >= 192 as good is common practice.
    expect(accepted({ tag: 'a', t: T, value: 1 }).quality).toBe(192);
    expect(accepted({ tag: 'a', t: T, value: 1, quality: 0 }).quality).toBe(0);
    expect(accepted({ tag: 'a', t: T, value: 1, quality: 65_535 }).quality).toBe(65_535);
    expect(accepted({ tag: 'a', t: T, value: 1, quality: '64' }).quality).toBe(64);
    expect(accepted({ tag: 'a', t: T, value: 1, quality: null }).quality).toBe(192);
  });

  it('refuses anything else, naming it', () => {
    const cases: [unknown, string][] = [
      [65_536, 'The quality 65536 is not an integer from 0 to 65535 (OPC style; 192 is good).'],
      [-1, 'The quality -1 is not an integer from 0 to 65535 (OPC style; 192 is good).'],
      [192.5, 'The quality 192.5 is not an integer from 0 to 65535 (OPC style; 192 is good).'],
      ['good', 'The quality "good" is not an integer from 0 to 65535 (OPC style; 192 is good).'],
      [
        { q: 1 },
        'The quality (an object) is not an integer from 0 to 65535 (OPC style; 192 is good).',
      ],
    ];
    for (const [quality, reason] of cases) {
      const rejection = rejected({ tag: 'a', t: T, value: 1, quality });
      expect(rejection.code).toBe('QUALITY_INVALID');
      expect(rejection.reason).toBe(reason);
    }
  });
});

describe('checkSample: valid range', () => {
  const ranges: Record<string, { min: number | null; max: number | null }> = {
    temp: { min: 0, max: 400 },
    open: { min: null, max: 100 },
  };
  const ctx = context({ validRange: (tag) => ranges[tag] });

  it('refuses good samples outside the range, with the limit in the reason', () => {
    const high = rejected({ tag: 'temp', t: T, value: 401 }, ctx);
    expect(high.code).toBe('VALUE_OUT_OF_RANGE');
    expect(high.reason).toBe('The value 401 is above the valid maximum 400 of tag "temp".');
    expect(high.tag).toBe('temp');
    expect(rejected({ tag: 'temp', t: T, value: '-0.5' }, ctx).reason).toBe(
      'The value -0.5 is below the valid minimum 0 of tag "temp".',
    );
    expect(accepted({ tag: 'temp', t: T, value: 400 }, ctx).value).toBe(400);
    expect(accepted({ tag: 'open', t: T, value: -1e9 }, ctx).value).toBe(-1e9);
    expect(accepted({ tag: 'unknown', t: T, value: 1e9 }, ctx).value).toBe(1e9);
  });

  it('keeps bad-quality and null samples whatever their value', () => {
    expect(accepted({ tag: 'temp', t: T, value: 9999, quality: 0 }, ctx).value).toBe(9999);
    expect(accepted({ tag: 'temp', t: T, value: null, quality: 192 }, ctx).value).toBeNull();
  });
});

describe('checkSample: tag names', () => {
  it('takes ordinary plant tag names', () => {
    for (const tag of ['FIC-101.PV', 'site/evap 1/steam', 'Dampf_Menge', 'ä'.repeat(200)]) {
      expect(tagNameProblem(tag), tag).toBeNull();
    }
  });

  it('refuses empty, long, control, wildcard, padded and broken names', () => {
    const cases: [string, string][] = [
      ['', 'The tag name is empty.'],
      [
        'x'.repeat(201),
        `The tag name "${'x'.repeat(80)}…" is 201 characters long; at most 200 are allowed.`,
      ],
      ['a\u0000b', 'The tag name "a\\u0000b" contains a control character.'],
      ['a\tb', 'The tag name "a\\tb" contains a control character.'],
      ['site/+/pv', 'The tag name "site/+/pv" contains an MQTT wildcard ("+" or "#").'],
      ['pv#2', 'The tag name "pv#2" contains an MQTT wildcard ("+" or "#").'],
      [' pv', 'The tag name " pv" starts or ends with white space.'],
      ['pv\ud800', 'The tag name "pv\\ud800" is not valid Unicode.'],
    ];
    for (const [tag, reason] of cases) {
      const rejection = rejected({ tag, t: T, value: 1 });
      expect(rejection.code).toBe('TAG_NAME_INVALID');
      expect(rejection.reason).toBe(reason);
      expect(rejection.tag).toBeNull();
    }
  });
});

describe('rejections', () => {
  it('carry the source, the raw input, the tag and the receive time', () => {
    expect(rejected({ tag: 'a', t: 'x', value: 1 }, context({ raw: 'a,x,1' }))).toEqual({
      source: 'test',
      raw: 'a,x,1',
      reason: 'The time "x" is neither epoch milliseconds nor an ISO 8601 time.',
      code: 'TIME_UNREADABLE',
      tag: 'a',
      receivedAt: RECEIVED,
    });
  });

  it('put a prefix before the reason when one input holds many samples', () => {
    const ctx = context({ reasonPrefix: 'At index 3: ' });
    expect(rejected({ tag: 'a', t: T, value: 'x' }, ctx).reason).toBe(
      'At index 3: the value "x" is not a number.',
    );
    expect(buildRejection(ctx, 'PAYLOAD_SHAPE', 'the element is a number.', null).reason).toBe(
      'At index 3: the element is a number.',
    );
  });

  it('cut the raw input to 64 KiB of UTF-8 without splitting a character', () => {
    expect(cutRaw('short')).toBe('short');
    const ascii = 'a'.repeat(RAW_LIMIT_BYTES + 10);
    expect(cutRaw(ascii)).toHaveLength(RAW_LIMIT_BYTES);
    const emoji = '😀'.repeat(RAW_LIMIT_BYTES);
    const cut = cutRaw(emoji);
    expect(new TextEncoder().encode(cut).length).toBe(RAW_LIMIT_BYTES);
    expect(cut.endsWith('😀')).toBe(true);
    const threeByte = 'a' + '€'.repeat(RAW_LIMIT_BYTES);
    expect(new TextEncoder().encode(cutRaw(threeByte)).length).toBeLessThanOrEqual(RAW_LIMIT_BYTES);
  });

  it('show long text shortened and other kinds by name', () => {
    expect(showValue('x'.repeat(100))).toBe(`"${'x'.repeat(80)}…"`);
    expect(showValue(12)).toBe('12');
    expect(showValue(null)).toBe('null');
    expect(showValue([])).toBe('an array');
  });
});
