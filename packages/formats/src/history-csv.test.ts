import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { TrueshiftError } from '@trueshift/errors';
import { locateChange, parseHistoryCsv, splitCsvLine } from './history-csv.js';

function errorOf(run: () => unknown): TrueshiftError {
  try {
    run();
  } catch (error) {
    if (error instanceof TrueshiftError) return error;
    throw error;
  }
  throw new Error('expected a TrueshiftError');
}

describe('parseHistoryCsv', () => {
  it('reads ISO 8601 times as UTC unless a zone is given', () => {
    const table = parseHistoryCsv(
      'time,value\n2026-03-01T00:00:00Z,1.5\n2026-03-01 01:00,2\n2026-03-01T03:00:00+01:00,2.5\n',
    );
    expect(table.timeKind).toBe('iso-8601');
    expect(Array.from(table.at)).toEqual([
      Date.UTC(2026, 2, 1, 0),
      Date.UTC(2026, 2, 1, 1),
      Date.UTC(2026, 2, 1, 2),
    ]);
    expect(Array.from(table.values)).toEqual([1.5, 2, 2.5]);
    expect(Array.from(table.lines)).toEqual([2, 3, 4]);
  });

  it('tells batch numbers from epoch milliseconds', () => {
    expect(parseHistoryCsv('batch,yield\n1,85.5\n2,81.7\n').timeKind).toBe('ordinal');
    expect(parseHistoryCsv('ts,value\n1767225600000,3\n1767225660000,4\n').timeKind).toBe(
      'epoch-ms',
    );
  });

  it('picks columns by name, by option, and handles semicolons, quotes and a byte-order mark', () => {
    const table = parseHistoryCsv(
      '\uFEFFsite;timestamp;value;unit\n"North; hall";2026-01-01;7;"kg/t"\nNorth;2026-01-02;8;kg/t\n',
    );
    expect(table.timeColumn).toBe('timestamp');
    expect(table.valueColumn).toBe('value');
    expect(Array.from(table.values)).toEqual([7, 8]);
    const chosen = parseHistoryCsv('when,a,b\n1,10,20\n2,11,21\n', {
      timeColumn: 'when',
      valueColumn: 'b',
    });
    expect(Array.from(chosen.values)).toEqual([20, 21]);
  });

  it('names the line and the reason of a bad row', () => {
    const text = 'time,value\n1,10\n2,11\n3,abc\n4,12\n';
    const error = errorOf(() => parseHistoryCsv(text));
    expect(error.code).toBe('CSV_BAD_ROW');
    expect(error.message).toContain('Line 4');
    expect(error.message).toContain('"abc" is not a finite number');
  });

  it('rejects rows out of time order, empty values and short rows', () => {
    expect(errorOf(() => parseHistoryCsv('time,value\n2,1\n1,2\n')).message).toContain(
      'Line 3: the time "1" is not after',
    );
    expect(errorOf(() => parseHistoryCsv('time,value\n1,1\n2,\n')).message).toContain(
      'Line 3: the value is empty',
    );
    expect(errorOf(() => parseHistoryCsv('time,value,x\n1,1,0\n2,2\n')).message).toContain(
      'Line 3: expected 3 cells, found 2',
    );
  });

  it('can skip bad rows and list each with its reason', () => {
    const table = parseHistoryCsv('time,value\n1,10\n2,NaN\n3,12\nx,4\n', { skipBadRows: true });
    expect(Array.from(table.values)).toEqual([10, 12]);
    expect(table.skipped).toEqual([
      { line: 3, reason: 'the value "NaN" is not a finite number.' },
      { line: 5, reason: 'the time "x" cannot be read as ordinal like the rows above.' },
    ]);
  });

  it('rejects an empty file, a file without samples and an unclear header', () => {
    expect(errorOf(() => parseHistoryCsv('\n\n')).code).toBe('CSV_EMPTY');
    expect(errorOf(() => parseHistoryCsv('time,value\n')).code).toBe('CSV_EMPTY');
    expect(errorOf(() => parseHistoryCsv('time,a,b\n1,2,3\n')).code).toBe('CSV_BAD_HEADER');
    expect(errorOf(() => parseHistoryCsv('justone\n1\n')).code).toBe('CSV_BAD_HEADER');
    expect(errorOf(() => parseHistoryCsv('t,v\n1,2\n', { valueColumn: 'y' })).message).toContain(
      'no value column named "y"',
    );
  });

  it('never throws anything but a catalogued error on arbitrary text', () => {
    fc.assert(
      fc.property(fc.string({ maxLength: 200 }), (text) => {
        try {
          parseHistoryCsv(text);
        } catch (error) {
          expect(error).toBeInstanceOf(TrueshiftError);
        }
      }),
      { numRuns: 500 },
    );
  });

  it('round-trips any ordered series of finite values', () => {
    fc.assert(
      fc.property(
        fc.array(fc.double({ noNaN: true, noDefaultInfinity: true }), { minLength: 1 }),
        (values) => {
          const text = ['time,value', ...values.map((v, i) => `${i + 1},${v}`)].join('\n');
          expect(Array.from(parseHistoryCsv(text).values)).toEqual(values.map((v) => v + 0));
        },
      ),
    );
  });
});

describe('splitCsvLine', () => {
  it('keeps delimiters and doubled quotes inside quoted cells', () => {
    expect(splitCsvLine('a,"b,c","say ""hi""",', ',')).toEqual(['a', 'b,c', 'say "hi"', '']);
  });
});

describe('locateChange', () => {
  const table = parseHistoryCsv('time,value\n2026-01-01,1\n2026-01-02,2\n2026-01-03,3\n');

  it('finds the first sample after the change by row or by time', () => {
    expect(locateChange(table, 'row:2')).toBe(1);
    expect(locateChange(table, '2026-01-02')).toBe(1);
    expect(locateChange(table, '2026-01-01T12:00:00Z')).toBe(1);
  });

  it('refuses a change outside the data or written unlike the file', () => {
    expect(errorOf(() => locateChange(table, 'row:1')).code).toBe('CHANGE_NOT_IN_DATA');
    expect(errorOf(() => locateChange(table, '2027-01-01')).code).toBe('CHANGE_NOT_IN_DATA');
    expect(errorOf(() => locateChange(table, 'yesterday')).code).toBe('INVALID_ARGUMENT');
  });
});
