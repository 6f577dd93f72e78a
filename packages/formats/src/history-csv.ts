import { TrueshiftError } from '@trueshift/errors';
import { looksLikeIsoTime, parseIsoTime } from './iso-time.js';

/** How the time column of a history file is read. */
export type TimeKind = 'iso-8601' | 'epoch-ms' | 'ordinal';

export interface SkippedRow {
  line: number;
  reason: string;
}

/**
 * One tag's history, in time order. Columnar, because a historian export can hold millions of rows
 * and the statistics work on plain number arrays.
 */
export interface HistoryTable {
  timeColumn: string;
  valueColumn: string;
  timeKind: TimeKind;
  /** The time cell as written in the file. */
  times: string[];
  /** Epoch milliseconds for dates, or the number itself for ordinal times (batch numbers). */
  at: Float64Array;
  values: Float64Array;
  /** The 1-based line of the file each sample came from, so later messages can point at it. */
  lines: Int32Array;
  skipped: SkippedRow[];
}

export interface ParseHistoryOptions {
  timeColumn?: string;
  valueColumn?: string;
  /** Leave out unreadable rows (and list them) instead of rejecting the whole file. */
  skipBadRows?: boolean;
}

const TIME_NAMES = /^(time|timestamp|date|datetime|date_time|ts|batch|batch_no|index|sample|t)$/i;
// Numbers at or above this are epoch milliseconds (after 1973); below, they count batches or rows.
const EPOCH_MS_FLOOR = 1e11;

/** Splits one CSV line, honouring double quotes (a doubled quote inside quotes is a quote). */
export function splitCsvLine(line: string, delimiter: string): string[] {
  if (!line.includes('"')) return line.split(delimiter);
  const cells: string[] = [];
  let cell = '';
  let quoted = false;
  for (let i = 0; i < line.length; i++) {
    const ch = line.charAt(i);
    if (quoted) {
      if (ch === '"') {
        if (line.charAt(i + 1) === '"') {
          cell += '"';
          i++;
        } else {
          quoted = false;
        }
      } else {
        cell += ch;
      }
    } else if (ch === '"') {
      quoted = true;
    } else if (ch === delimiter) {
      cells.push(cell);
      cell = '';
    } else {
      cell += ch;
    }
  }
  cells.push(cell);
  return cells;
}

/** The delimiter of a CSV file: whichever of comma, semicolon and tab the header uses most. */
export function detectDelimiter(header: string): string {
  let best = ',';
  let bestCount = 0;
  for (const candidate of [',', ';', '\t']) {
    const count = header.split(candidate).length - 1;
    if (count > bestCount) {
      best = candidate;
      bestCount = count;
    }
  }
  return best;
}

function findColumn(
  names: string[],
  wanted: string | undefined,
  fallback: (names: string[]) => number,
  role: string,
): number {
  if (wanted !== undefined) {
    const index = names.findIndex((name) => name.toLowerCase() === wanted.toLowerCase());
    if (index < 0) {
      throw new TrueshiftError(
        'CSV_BAD_HEADER',
        `Line 1: there is no ${role} column named "${wanted}"; the columns are ${names.map((n) => `"${n}"`).join(', ')}.`,
      );
    }
    return index;
  }
  return fallback(names);
}

/** Reads a time cell; returns NaN when the cell does not fit the kind. */
function readTime(cell: string, kind: TimeKind): number {
  if (kind === 'iso-8601') return parseIsoTime(cell);
  if (cell === '') return Number.NaN;
  return Number(cell);
}

function timeKindOf(cell: string): TimeKind | null {
  if (looksLikeIsoTime(cell)) return 'iso-8601';
  const asNumber = cell === '' ? Number.NaN : Number(cell);
  if (!Number.isFinite(asNumber)) return null;
  return Math.abs(asNumber) >= EPOCH_MS_FLOOR ? 'epoch-ms' : 'ordinal';
}

/**
 * Parses a history file of one tag: a header row, then one row per sample with a time and a value,
 * in time order. A bad row stops the parse with an error naming its line and the reason, unless
 * `skipBadRows` is set, in which case it is listed in `skipped`.
 */
export function parseHistoryCsv(text: string, options: ParseHistoryOptions = {}): HistoryTable {
  const rawLines = text.split(/\r?\n/);
  const headerIndex = rawLines.findIndex((line) => line.trim() !== '');
  if (headerIndex < 0) throw new TrueshiftError('CSV_EMPTY', 'The file is empty.');
  const headerLine = (rawLines[headerIndex] ?? '').replace(/^\uFEFF/, '');
  const delimiter = detectDelimiter(headerLine);
  const names = splitCsvLine(headerLine, delimiter).map((name) => name.trim());
  if (names.length < 2) {
    throw new TrueshiftError(
      'CSV_BAD_HEADER',
      `Line ${headerIndex + 1}: expected a header with a time column and a value column, found "${headerLine}".`,
    );
  }
  const timeIndex = findColumn(
    names,
    options.timeColumn,
    (all) =>
      Math.max(
        0,
        all.findIndex((name) => TIME_NAMES.test(name)),
      ),
    'time',
  );
  const valueIndex = findColumn(
    names,
    options.valueColumn,
    (all) => {
      const named = all.findIndex((name, i) => i !== timeIndex && /^value$/i.test(name));
      if (named >= 0) return named;
      if (all.length === 2) return timeIndex === 0 ? 1 : 0;
      throw new TrueshiftError(
        'CSV_BAD_HEADER',
        `Line ${headerIndex + 1}: cannot tell which column holds the values among ${all.map((n) => `"${n}"`).join(', ')}; name it with the value column option.`,
      );
    },
    'value',
  );
  if (timeIndex === valueIndex) {
    throw new TrueshiftError(
      'CSV_BAD_HEADER',
      `Line ${headerIndex + 1}: the time and value columns are the same column.`,
    );
  }

  const capacity = rawLines.length - headerIndex;
  const at = new Float64Array(capacity);
  const values = new Float64Array(capacity);
  const lines = new Int32Array(capacity);
  const times: string[] = [];
  const skipped: SkippedRow[] = [];
  let timeKind: TimeKind | null = null;
  let count = 0;

  const reject = (line: number, reason: string): void => {
    if (options.skipBadRows === true) skipped.push({ line, reason });
    else throw new TrueshiftError('CSV_BAD_ROW', `Line ${line}: ${reason}`);
  };

  for (let i = headerIndex + 1; i < rawLines.length; i++) {
    const raw = rawLines[i] ?? '';
    if (raw.trim() === '') continue;
    const lineNumber = i + 1;
    const cells = splitCsvLine(raw, delimiter);
    const timeCell = (cells[timeIndex] ?? '').trim();
    const valueCell = (cells[valueIndex] ?? '').trim();
    if (cells.length < names.length) {
      reject(lineNumber, `expected ${names.length} cells, found ${cells.length}.`);
      continue;
    }
    timeKind ??= timeKindOf(timeCell);
    if (timeKind === null) {
      reject(lineNumber, `the time "${timeCell}" is neither an ISO 8601 time nor a number.`);
      continue;
    }
    const time = readTime(timeCell, timeKind);
    if (!Number.isFinite(time)) {
      reject(
        lineNumber,
        `the time "${timeCell}" cannot be read as ${timeKind} like the rows above.`,
      );
      continue;
    }
    if (valueCell === '') {
      reject(lineNumber, 'the value is empty.');
      continue;
    }
    const value = Number(valueCell);
    if (!Number.isFinite(value)) {
      reject(lineNumber, `the value "${valueCell}" is not a finite number.`);
      continue;
    }
    const previous = count > 0 ? (at[count - 1] ?? Number.NaN) : Number.NEGATIVE_INFINITY;
    if (time <= previous) {
      reject(
        lineNumber,
        `the time "${timeCell}" is not after the previous row's time "${times[count - 1] ?? ''}"; rows must be in time order, one per time.`,
      );
      continue;
    }
    at[count] = time;
    values[count] = value;
    lines[count] = lineNumber;
    times.push(timeCell);
    count++;
  }
  if (count === 0) {
    throw new TrueshiftError('CSV_EMPTY', 'The file has a header but no readable sample rows.');
  }
  return {
    timeColumn: names[timeIndex] ?? '',
    valueColumn: names[valueIndex] ?? '',
    timeKind: timeKind ?? 'ordinal',
    times,
    at: at.slice(0, count),
    values: values.slice(0, count),
    lines: lines.slice(0, count),
    skipped,
  };
}

/**
 * Finds where a change went live: `row:N` is the N-th sample (1-based) as the first sample after the
 * change; anything else is a time in the file's own kind, and the first sample at or after it is the
 * first sample after the change. Returns the index of that sample.
 */
export function locateChange(table: HistoryTable, change: string): number {
  const trimmed = change.trim();
  const rowMatch = /^row:(\d+)$/i.exec(trimmed);
  let index: number;
  if (rowMatch) {
    index = Number(rowMatch[1]) - 1;
  } else {
    const time = readTime(trimmed, table.timeKind);
    if (!Number.isFinite(time)) {
      throw new TrueshiftError(
        'INVALID_ARGUMENT',
        `The change "${change}" is neither row:N nor a time written like the file's times (${table.timeKind}).`,
      );
    }
    index = table.at.findIndex((value) => value >= time);
  }
  if (index <= 0 || index >= table.at.length) {
    throw new TrueshiftError(
      'CHANGE_NOT_IN_DATA',
      `The change "${change}" must leave at least one sample before it and one after it (the file has ${table.at.length} samples).`,
    );
  }
  return index;
}
