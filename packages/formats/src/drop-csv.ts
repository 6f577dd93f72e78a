import { TrueshiftError } from '@trueshift/errors';
import type { QuarantineInput, SampleInput } from '@trueshift/store';
import { detectDelimiter, splitCsvLine } from './history-csv.js';
import {
  buildRejection,
  checkSample,
  checkSampleAt,
  checkTime,
  type ParsedSamples,
  type SampleContext,
  tagNameProblem,
} from './sample-checks.js';

export interface DropCsvContext {
  fileName: string;
  receivedAt: number;
  now: number;
  maxFutureMs: number;
  validRange?: SampleContext['validRange'];
}

/** Reads a drop file one line at a time, so a file of millions of rows never sits in memory. */
export interface DropCsvReader {
  /** long: one sample per row (time, tag, value[, quality]); wide: a time, then one column per tag. */
  readonly layout: 'long' | 'wide';
  /** Wide: the tag of each column after the time column. Long: empty, tags come with the rows. */
  readonly tags: readonly string[];
  readonly delimiter: string;
  /**
   * Judges one line (without its line break; a trailing \r is dropped). A blank line, or a wide
   * row whose tag cells are all empty, gives nothing and is not a rejection.
   */
  readLine(line: string, lineNumber: number): ParsedSamples;
}

const TIME_NAMES = new Set(['time', 'timestamp', 'date', 'datetime', 'date_time', 'ts', 't']);
const TIME_NAMES_TEXT = 'time, timestamp, date, datetime, date_time, ts or t';

function badHeader(problem: string): TrueshiftError {
  return new TrueshiftError('CSV_BAD_HEADER', problem.charAt(0).toUpperCase() + problem.slice(1));
}

function uniqueIndex(lower: readonly string[], name: string): number {
  const first = lower.indexOf(name);
  if (first >= 0 && lower.includes(name, first + 1)) {
    throw badHeader(`two columns are named "${name}".`);
  }
  return first;
}

function nullOr(cell: string): string | null {
  return cell.length === 4 && cell.toLowerCase() === 'null' ? null : cell;
}

/**
 * Creates the reader for a drop file from its header line: comma, semicolon or tab separated. A
 * header with tag and value columns is the long layout; otherwise the first column must be the time
 * and every other column names a tag. Throws CSV_BAD_HEADER naming the problem. Rows need not be in
 * time order: a drop file is taken as it is.
 */
export function createDropCsvReader(header: string, ctx: DropCsvContext): DropCsvReader {
  const headerLine = header.replace(/^\uFEFF/, '').replace(/\r$/, '');
  if (headerLine.trim() === '') throw badHeader('the header line is empty.');
  const delimiter = detectDelimiter(headerLine);
  const names = splitCsvLine(headerLine, delimiter).map((name) => name.trim());
  if (names.length < 2) {
    throw badHeader(
      `expected a time column and at least one more, separated by commas, semicolons or tabs; found ${JSON.stringify(headerLine.slice(0, 200))}.`,
    );
  }
  const lower = names.map((name) => name.toLowerCase());
  const width = names.length;
  const tagIndex = uniqueIndex(lower, 'tag');
  const valueIndex = uniqueIndex(lower, 'value');
  const qualityIndex = uniqueIndex(lower, 'quality');
  const contextFor = (raw: string, lineNumber: number): SampleContext => ({
    // Written out rather than spread: this runs once per row, and a spread copy is several times slower.
    source: `csv:${ctx.fileName}:${lineNumber}`,
    raw,
    receivedAt: ctx.receivedAt,
    now: ctx.now,
    maxFutureMs: ctx.maxFutureMs,
    validRange: ctx.validRange,
  });
  const badRow = (raw: string, lineNumber: number, count: number): ParsedSamples => ({
    samples: [],
    rejected: [
      buildRejection(
        contextFor(raw, lineNumber),
        'CSV_BAD_ROW',
        `expected ${width} cells like the header, found ${count}.`,
        null,
      ),
    ],
  });
  const stripCr = (line: string): string => (line.endsWith('\r') ? line.slice(0, -1) : line);

  if (tagIndex >= 0 || valueIndex >= 0) {
    if (tagIndex < 0 || valueIndex < 0) {
      throw badHeader(
        `there is a "${tagIndex < 0 ? 'value' : 'tag'}" column but no "${tagIndex < 0 ? 'tag' : 'value'}" column; the long layout needs both, and a wide file names each column after its tag.`,
      );
    }
    const timeIndex = lower.findIndex((name) => TIME_NAMES.has(name));
    if (timeIndex < 0) {
      throw badHeader(`the long layout needs a time column named ${TIME_NAMES_TEXT}.`);
    }
    return {
      layout: 'long',
      tags: [],
      delimiter,
      readLine(line, lineNumber) {
        const text = stripCr(line);
        if (text.trim() === '') return { samples: [], rejected: [] };
        const cells = splitCsvLine(text, delimiter);
        if (cells.length !== width) return badRow(text, lineNumber, cells.length);
        const quality = qualityIndex < 0 ? '' : (cells[qualityIndex] ?? '').trim();
        const result = checkSample(
          {
            tag: (cells[tagIndex] ?? '').trim(),
            t: cells[timeIndex],
            value: nullOr((cells[valueIndex] ?? '').trim()),
            quality: quality === '' ? undefined : quality,
          },
          contextFor(text, lineNumber),
        );
        return result.ok
          ? { samples: [result.sample], rejected: [] }
          : { samples: [], rejected: [result.rejection] };
      },
    };
  }

  if (qualityIndex >= 0) {
    throw badHeader(
      'there is a "quality" column but no "tag" and "value" columns; quality is read only in the long layout.',
    );
  }
  if (!TIME_NAMES.has(lower[0] ?? '')) {
    throw badHeader(
      `the first column ${JSON.stringify(names[0])} is not a time column (${TIME_NAMES_TEXT}), and there are no "tag" and "value" columns for the long layout.`,
    );
  }
  const tags = names.slice(1);
  const seen = new Set<string>();
  for (let i = 0; i < tags.length; i++) {
    const tag = tags[i] ?? '';
    const problem = tagNameProblem(tag);
    if (problem !== null) throw badHeader(`column ${i + 2}: ${problem}`);
    if (seen.has(tag)) throw badHeader(`two columns are named ${JSON.stringify(tag)}.`);
    seen.add(tag);
  }
  return {
    layout: 'wide',
    tags,
    delimiter,
    readLine(line, lineNumber) {
      const text = stripCr(line);
      if (text.trim() === '') return { samples: [], rejected: [] };
      const cells = splitCsvLine(text, delimiter);
      if (cells.length !== width) return badRow(text, lineNumber, cells.length);
      const rowCtx = contextFor(text, lineNumber);
      // One time for the whole row: read once, and a bad time is one rejection, not one per tag.
      const time = checkTime(cells[0], rowCtx);
      if (!time.ok) {
        return { samples: [], rejected: [buildRejection(rowCtx, time.code, time.reason, null)] };
      }
      const samples: SampleInput[] = [];
      const rejected: QuarantineInput[] = [];
      for (let i = 1; i < width; i++) {
        const cell = (cells[i] ?? '').trim();
        if (cell === '') continue;
        const result = checkSampleAt(
          { tag: tags[i - 1] ?? '', value: nullOr(cell) },
          time.t,
          rowCtx,
        );
        if (result.ok) samples.push(result.sample);
        else rejected.push(result.rejection);
      }
      return { samples, rejected };
    },
  };
}
