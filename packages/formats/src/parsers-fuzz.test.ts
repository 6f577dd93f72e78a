import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { errorCatalogue, TrueshiftError } from '@trueshift/errors';
import type { QuarantineInput, SampleInput } from '@trueshift/store';
import { createDropCsvReader } from './drop-csv.js';
import { parseHttpSamples } from './http-samples.js';
import { parseMqttMessage, type SubscriptionSpec } from './mqtt-payload.js';
import { checkSample, RAW_LIMIT_BYTES, tagNameProblem } from './sample-checks.js';

// Property-based checks shared by every parser: whatever arrives, nothing throws, every input is
// either turned into samples or rejected with a catalogued code and a reason, and what is accepted
// is fit for the store.

const NOW = Date.UTC(2026, 2, 1, 12);
const RECEIVED = NOW - 7;
const base = { receivedAt: RECEIVED, now: NOW, maxFutureMs: 60_000 };
const ranges = (tag: string) => (tag.length % 2 === 0 ? { min: -10, max: 10 } : undefined);
const codes = new Set(Object.keys(errorCatalogue));
const encoder = new TextEncoder();

interface Parsed {
  samples: readonly SampleInput[];
  rejected: readonly QuarantineInput[];
}

function expectWellFormed(result: Parsed): void {
  for (const sample of result.samples) {
    expect(tagNameProblem(sample.tag)).toBeNull();
    expect(Number.isInteger(sample.t)).toBe(true);
    expect(sample.t).toBeLessThanOrEqual(NOW + 60_000);
    if (sample.value !== null) expect(Number.isFinite(sample.value)).toBe(true);
    expect(Number.isInteger(sample.quality)).toBe(true);
    expect(sample.quality).toBeGreaterThanOrEqual(0);
    expect(sample.quality).toBeLessThanOrEqual(65_535);
    expect(sample.receivedAt).toBe(RECEIVED);
    const range = ranges(sample.tag);
    if (range !== undefined && sample.value !== null && sample.quality >= 192) {
      expect(Math.abs(sample.value)).toBeLessThanOrEqual(10);
    }
  }
  for (const rejection of result.rejected) {
    expect(rejection.reason.trim()).not.toBe('');
    expect(codes.has(rejection.code), rejection.code).toBe(true);
    expect(encoder.encode(rejection.raw).length).toBeLessThanOrEqual(RAW_LIMIT_BYTES);
    expect(rejection.receivedAt).toBe(RECEIVED);
  }
}

const texts = fc.oneof(
  fc.string(),
  fc.string({ unit: 'binary' }),
  fc.string({ unit: fc.constantFrom('1', '.', '-', 'e', 'n', 'a', 'N', ' ', ',', '\t', '"', 'T') }),
);
const times = fc.oneof(
  fc.integer({ min: 1e11, max: NOW + 120_000 }),
  fc.integer({ min: 1e11, max: NOW + 120_000 }).map(String),
  fc.date({ noInvalidDate: true }).map((d) => d.toISOString()),
  fc.double(),
  texts,
  fc.anything(),
);
const values = fc.oneof(
  fc.double(),
  fc.double().map(String),
  fc.constantFrom('NaN', 'Infinity', '-inf', '1e999', '12,5', '', ' 7 ', null),
  texts,
  fc.anything(),
);
const qualities = fc.oneof(
  fc.integer({ min: -2, max: 70_000 }),
  fc.anything(),
  fc.constant(undefined),
);
const tags = fc.oneof(
  fc.constantFrom('FI-101', 'TI-200.PV', 'evap1/steam', 'x'),
  fc.string(),
  fc.string({ unit: 'binary', maxLength: 210 }),
);

describe('checkSample on arbitrary input', () => {
  it('accepts a sample fit for the store or rejects with a catalogued code and a reason', () => {
    fc.assert(
      fc.property(tags, times, values, qualities, fc.boolean(), (tag, t, value, quality, live) => {
        const result = checkSample(
          { tag, t, value, quality },
          { ...base, source: 'fuzz', raw: 'raw', validRange: ranges, timeDefaultsToReceive: live },
        );
        expectWellFormed(
          result.ok
            ? { samples: [result.sample], rejected: [] }
            : { samples: [], rejected: [result.rejection] },
        );
      }),
      { numRuns: 3000 },
    );
  });
});

describe('parseMqttMessage on arbitrary payloads', () => {
  const numberSpec: SubscriptionSpec = { filter: 'site/+/+/pv', tag: '{2}.{3}', format: 'number' };
  const specs: SubscriptionSpec[] = [
    numberSpec,
    { filter: 'site/#', tag: '{#}', format: 'json' },
    { filter: 'site/#', tag: 'fixed', format: 'json', valueField: 'a.b', timeUnit: 's' },
  ];
  const topics = fc.oneof(
    fc.constantFrom('site/north/evap1/pv', 'site/a', 'site', '$SYS/x', 'other/x'),
    fc.string(),
  );
  const mqttCtx = { ...base, maxPayloadBytes: 2048, validRange: ranges };

  it('never throws on arbitrary bytes and always accounts for the message', () => {
    fc.assert(
      fc.property(
        fc.constantFrom(...specs),
        topics,
        fc.uint8Array({ maxLength: 3000 }),
        (spec, topic, payload) => {
          const result = parseMqttMessage(spec, topic, payload, mqttCtx);
          expectWellFormed(result);
          expect(result.samples.length + result.rejected.length).toBeGreaterThan(0);
          for (const entry of [...result.samples, ...result.rejected]) {
            expect(entry.source).toBe(`mqtt:${topic}`);
          }
        },
      ),
      { numRuns: 1500 },
    );
  });

  it('judges each element of a JSON array on its own', () => {
    const element = fc.oneof(
      fc.record(
        { time: times, value: values, quality: qualities, a: fc.record({ b: values }) },
        { requiredKeys: [] },
      ),
      fc.jsonValue(),
    );
    fc.assert(
      fc.property(
        fc.constantFrom(...specs.slice(1)),
        fc.oneof(fc.jsonValue(), fc.array(element, { minLength: 1, maxLength: 20 })),
        (spec, body) => {
          const text = JSON.stringify(body);
          const result = parseMqttMessage(spec, 'site/a/b', encoder.encode(text), mqttCtx);
          expectWellFormed(result);
          const count = result.samples.length + result.rejected.length;
          if (Array.isArray(body) && body.length > 0 && encoder.encode(text).length <= 2048) {
            expect(count).toBe(body.length);
          } else {
            expect(count).toBe(1);
          }
        },
      ),
      { numRuns: 1500 },
    );
  });

  it('takes every finite number of the number format exactly', () => {
    fc.assert(
      fc.property(fc.double(), (value) => {
        const result = parseMqttMessage(numberSpec, 'site/n/e/pv', encoder.encode(String(value)), {
          ...base,
          maxPayloadBytes: 100,
        });
        if (Number.isFinite(value)) expect(result.samples.map((s) => s.value)).toEqual([value + 0]);
        else expect(result.rejected.map((r) => r.code)).toEqual(['VALUE_NOT_FINITE']);
      }),
    );
  });
});

describe('createDropCsvReader on arbitrary text', () => {
  const dropCtx = { ...base, fileName: 'fuzz.csv', validRange: ranges };
  // fc.anything() can yield objects without a prototype, which String() cannot convert.
  const asCell = (value: unknown): string => {
    try {
      return String(value);
    } catch {
      return '[object]';
    }
  };
  const cell = fc.oneof(
    texts,
    times.map(asCell),
    values.map(asCell),
    fc.constantFrom('FI-101', 'time', 'tag', 'value', 'quality', 'null', '192', ''),
  );
  const lineOf = (delimiter: string) =>
    fc.array(cell, { maxLength: 6 }).map((cells) => cells.join(delimiter));

  it('throws only the documented header error', () => {
    fc.assert(
      fc.property(fc.oneof(texts, lineOf(','), lineOf(';')), (header) => {
        try {
          const reader = createDropCsvReader(header, dropCtx);
          expect(['long', 'wide']).toContain(reader.layout);
        } catch (error) {
          expect(error).toBeInstanceOf(TrueshiftError);
          expect((error as TrueshiftError).code).toBe('CSV_BAD_HEADER');
        }
      }),
      { numRuns: 2000 },
    );
  });

  it('never throws on a line and accounts for every non-blank one', () => {
    const headers = [
      'time,tag,value,quality',
      'tag;Value;TS',
      'timestamp\tFI-101\tTI-200',
      'time,a,b,c',
    ];
    fc.assert(
      fc.property(
        fc.constantFrom(...headers),
        fc.oneof(lineOf(','), lineOf(';'), lineOf('\t'), texts),
        fc.integer({ min: 2, max: 1e6 }),
        (header, line, lineNumber) => {
          const reader = createDropCsvReader(header, dropCtx);
          const result = reader.readLine(line, lineNumber);
          expectWellFormed(result);
          for (const entry of [...result.samples, ...result.rejected]) {
            expect(entry.source).toBe(`csv:fuzz.csv:${lineNumber}`);
          }
          const count = result.samples.length + result.rejected.length;
          if (line.trim() === '') expect(count).toBe(0);
          else if (reader.layout === 'long') expect(count).toBe(1);
          else expect(count).toBeLessThanOrEqual(reader.tags.length);
        },
      ),
      { numRuns: 3000 },
    );
  });

  it('reads back every well-formed long row exactly', () => {
    fc.assert(
      fc.property(
        fc.constantFrom('FI-101', 'TI 200', 'a/b.c'),
        fc.integer({ min: 1e11, max: NOW }),
        fc.double({ noNaN: true, noDefaultInfinity: true, min: -1e6, max: 1e6 }),
        fc.integer({ min: 0, max: 65_535 }),
        (tag, t, value, quality) => {
          const reader = createDropCsvReader('tag,time,value,quality', dropCtx);
          const result = reader.readLine(`${tag},${t},${value},${quality}`, 2);
          expectWellFormed(result);
          const inRange = ranges(tag) === undefined || quality < 192 || Math.abs(value) <= 10;
          if (inRange) {
            expect(result.samples.map((s) => [s.tag, s.t, s.value, s.quality])).toEqual([
              [tag, t, value + 0, quality],
            ]);
          } else {
            expect(result.rejected.map((r) => r.code)).toEqual(['VALUE_OUT_OF_RANGE']);
          }
        },
      ),
    );
  });
});

describe('parseHttpSamples on arbitrary bodies', () => {
  it('never throws and accounts for every element', () => {
    const element = fc.oneof(
      fc.record(
        {
          tag: fc.oneof(tags, fc.anything()),
          time: times,
          t: times,
          value: values,
          quality: qualities,
        },
        { requiredKeys: [] },
      ),
      fc.anything(),
    );
    fc.assert(
      fc.property(
        fc.oneof(
          fc.anything({ withBigInt: true, withNullPrototype: true, withBoxedValues: true }),
          fc.array(element, { maxLength: 12 }),
        ),
        (body) => {
          const result = parseHttpSamples(body, { ...base, maxSamples: 10, validRange: ranges });
          expectWellFormed(result);
          const count = result.samples.length + result.rejected.length;
          if (Array.isArray(body) && body.length > 0 && body.length <= 10) {
            expect(count).toBe(body.length);
          } else {
            expect(count).toBe(1);
          }
        },
      ),
      { numRuns: 2000 },
    );
  });
});
