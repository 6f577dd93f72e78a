import { describe, expect, it } from 'vitest';
import { TrueshiftError } from '@trueshift/errors';
import { createDropCsvReader, type DropCsvContext } from './drop-csv.js';

const NOW = Date.UTC(2026, 2, 1, 12);
const RECEIVED = NOW - 1;
const T = Date.UTC(2026, 2, 1, 11);
const ctx: DropCsvContext = {
  fileName: 'drop.csv',
  receivedAt: RECEIVED,
  now: NOW,
  maxFutureMs: 60_000,
};

function headerError(header: string): TrueshiftError {
  try {
    createDropCsvReader(header, ctx);
  } catch (error) {
    if (error instanceof TrueshiftError) return error;
    throw error;
  }
  throw new Error('expected a TrueshiftError');
}

describe('createDropCsvReader, long layout', () => {
  it('finds time, tag, value and quality by name in any order and case', () => {
    const reader = createDropCsvReader('Value;TAG;Quality;Timestamp\r', ctx);
    expect(reader.layout).toBe('long');
    expect(reader.delimiter).toBe(';');
    expect(reader.tags).toEqual([]);
    expect(reader.readLine('12.5;FI-101;64;2026-03-01T11:00:00Z\r', 2)).toEqual({
      samples: [
        {
          tag: 'FI-101',
          t: T,
          value: 12.5,
          quality: 64,
          source: 'csv:drop.csv:2',
          receivedAt: RECEIVED,
        },
      ],
      rejected: [],
    });
  });

  it('defaults quality, keeps null values and takes rows out of time order', () => {
    const reader = createDropCsvReader('time,tag,value,quality', ctx);
    const rows = [`${T},a,1,`, `${T - 60_000},a,null,`, `2026-03-01 10:00,"b, north",2,0`].map(
      (line, i) => reader.readLine(line, i + 2),
    );
    expect(rows.flatMap((r) => r.samples.map((s) => [s.tag, s.t, s.value, s.quality]))).toEqual([
      ['a', T, 1, 192],
      ['a', T - 60_000, null, 0],
      ['b, north', Date.UTC(2026, 2, 1, 10), 2, 0],
    ]);
    expect(rows.flatMap((r) => r.rejected)).toEqual([]);
  });

  it('rejects a bad row with the line, the raw text and a reason', () => {
    const reader = createDropCsvReader('time\ttag\tvalue', {
      ...ctx,
      validRange: () => ({ min: 0, max: 5 }),
    });
    const lines = [
      `${T}\ta\tabc`,
      `\ta\t1`,
      `${T}\ta\t`,
      `${T}\ta`,
      `${T}\ta\t9`,
      `${T}\ta+b\t1`,
      `2026-03-01T12:05:00Z\ta\t1`,
    ];
    const rejected = lines.flatMap((line, i) => reader.readLine(line, i + 2).rejected);
    expect(rejected.map((r) => [r.source, r.code, r.reason, r.tag])).toEqual([
      ['csv:drop.csv:2', 'VALUE_NOT_NUMBER', 'The value "abc" is not a number.', 'a'],
      ['csv:drop.csv:3', 'TIME_MISSING', 'The time is missing.', 'a'],
      ['csv:drop.csv:4', 'VALUE_NOT_NUMBER', 'The value is empty.', 'a'],
      ['csv:drop.csv:5', 'CSV_BAD_ROW', 'Expected 3 cells like the header, found 2.', null],
      [
        'csv:drop.csv:6',
        'VALUE_OUT_OF_RANGE',
        'The value 9 is above the valid maximum 5 of tag "a".',
        'a',
      ],
      [
        'csv:drop.csv:7',
        'TAG_NAME_INVALID',
        'The tag name "a+b" contains an MQTT wildcard ("+" or "#").',
        null,
      ],
      [
        'csv:drop.csv:8',
        'TIME_IN_FUTURE',
        'The time "2026-03-01T12:05:00Z" is 2026-03-01T12:05:00.000Z, later than now plus 60000 ms (2026-03-01T12:01:00.000Z).',
        'a',
      ],
    ]);
    expect(rejected[0]?.raw).toBe(`${T}\ta\tabc`);
  });

  it('gives nothing for a blank line', () => {
    const reader = createDropCsvReader('time,tag,value', ctx);
    expect(reader.readLine('  \r', 9)).toEqual({ samples: [], rejected: [] });
  });
});

describe('createDropCsvReader, wide layout', () => {
  it('reads one sample per non-empty cell, with the row time', () => {
    const reader = createDropCsvReader('\uFEFFtimestamp,FI-101,TI-200,PI-7', ctx);
    expect(reader.layout).toBe('wide');
    expect(reader.tags).toEqual(['FI-101', 'TI-200', 'PI-7']);
    const { samples, rejected } = reader.readLine('2026-03-01T11:00:00Z,1.5,,NULL', 2);
    expect(rejected).toEqual([]);
    expect(samples).toEqual([
      {
        tag: 'FI-101',
        t: T,
        value: 1.5,
        quality: 192,
        source: 'csv:drop.csv:2',
        receivedAt: RECEIVED,
      },
      {
        tag: 'PI-7',
        t: T,
        value: null,
        quality: 0,
        source: 'csv:drop.csv:2',
        receivedAt: RECEIVED,
      },
    ]);
    expect(reader.readLine(`${T},,,`, 3)).toEqual({ samples: [], rejected: [] });
  });

  it('rejects a bad time once for the row and a bad cell for its tag only', () => {
    const reader = createDropCsvReader('date,a,b', ctx);
    const badTime = reader.readLine('yesterday,1,2', 2);
    expect(badTime.samples).toEqual([]);
    expect(badTime.rejected.map((r) => [r.code, r.reason, r.tag])).toEqual([
      [
        'TIME_UNREADABLE',
        'The time "yesterday" is neither epoch milliseconds nor an ISO 8601 time.',
        null,
      ],
    ]);
    const badCell = reader.readLine(`${T},x,2`, 3);
    expect(badCell.samples.map((s) => [s.tag, s.value])).toEqual([['b', 2]]);
    expect(badCell.rejected.map((r) => [r.code, r.reason, r.tag])).toEqual([
      ['VALUE_NOT_NUMBER', 'The value "x" is not a number.', 'a'],
    ]);
    expect(reader.readLine(`${T},1`, 4).rejected.map((r) => r.reason)).toEqual([
      'Expected 3 cells like the header, found 2.',
    ]);
  });

  it('takes an ISO time before 1973 as written, but not a small epoch number', () => {
    const reader = createDropCsvReader('time,a', ctx);
    expect(reader.readLine('1970-01-02,1', 2).samples.map((s) => s.t)).toEqual([86_400_000]);
    expect(reader.readLine('86400000,1', 3).rejected.map((r) => r.code)).toEqual([
      'TIME_UNREADABLE',
    ]);
  });
});

describe('createDropCsvReader, bad headers', () => {
  it('names the problem', () => {
    const cases: [string, string][] = [
      ['', 'The header line is empty.'],
      [
        'justone',
        'Expected a time column and at least one more, separated by commas, semicolons or tabs; found "justone".',
      ],
      [
        'time,value',
        'There is a "value" column but no "tag" column; the long layout needs both, and a wide file names each column after its tag.',
      ],
      [
        'time,tag',
        'There is a "tag" column but no "value" column; the long layout needs both, and a wide file names each column after its tag.',
      ],
      [
        'when,tag,value',
        'The long layout needs a time column named time, timestamp, date, datetime, date_time, ts or t.',
      ],
      ['time,tag,value,Value', 'Two columns are named "value".'],
      [
        'FI-101,TI-200',
        'The first column "FI-101" is not a time column (time, timestamp, date, datetime, date_time, ts or t), and there are no "tag" and "value" columns for the long layout.',
      ],
      ['time,a,,b', 'Column 3: the tag name is empty.'],
      ['time,a,b#', 'Column 3: the tag name "b#" contains an MQTT wildcard ("+" or "#").'],
      ['time,a,a', 'Two columns are named "a".'],
      [
        'time,a,quality',
        'There is a "quality" column but no "tag" and "value" columns; quality is read only in the long layout.',
      ],
    ];
    for (const [header, detail] of cases) {
      const error = headerError(header);
      expect(error.code, header).toBe('CSV_BAD_HEADER');
      expect(error.detail, header).toBe(detail);
    }
  });
});
