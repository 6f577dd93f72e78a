import { createHash } from 'node:crypto';
import { createReadStream } from 'node:fs';
import { appendFile, stat } from 'node:fs/promises';
import { basename } from 'node:path';
import { createInterface } from 'node:readline';
import { type ErrorCode, isTrueshiftError, TrueshiftError } from '@trueshift/errors';
import { buildRejection, createDropCsvReader, type DropCsvReader } from '@trueshift/formats';
import type { QuarantineInput, SampleInput, Store } from '@trueshift/store';
import type { Logger } from 'pino';
import { createValidRanges } from './valid-ranges.js';

export interface CsvImportProgress {
  /** The name the file is recorded under. */
  file: string;
  /** Lines after the header read and committed so far. */
  rows: number;
  /** Bytes of the file read so far. */
  bytes: number;
  totalBytes: number;
  /** The last line committed (the header is line 1). */
  line: number;
}

export interface CsvImportOptions {
  maxFutureMs: number;
  /** Lines per store transaction; 5000 by default. */
  batchRows?: number;
  /** The name recorded and used in sources ("csv:<name>:<line>"); the file's own name by default. */
  name?: string;
  /** Import even when this content was taken before: to finish an import that was interrupted. */
  again?: boolean;
  /** An interrupted earlier run already quarantined the rejections up to this line: not again. */
  quarantinedThroughLine?: number;
  /** Each rejection is appended here as "line N: reason [CODE]", batch by batch. */
  reasonsPath?: string;
  onProgress?: (progress: CsvImportProgress) => void;
  /** Stops between batches; the result then says interrupted. */
  signal?: AbortSignal;
}

export interface CsvImportDeps {
  store: Store;
  clock: () => number;
  log?: Logger;
  options: CsvImportOptions;
}

export interface CsvRejectedLine {
  line: number;
  code: ErrorCode;
  reason: string;
}

export interface CsvImportResult {
  file: string;
  name: string;
  /** sha256 of the content, hex. */
  hash: string;
  bytes: number;
  /** The same content was taken before; nothing was read or written. */
  alreadyTaken: boolean;
  /** Stopped by the signal; what was committed stays, and an import with `again` finishes it. */
  interrupted: boolean;
  layout: 'long' | 'wide' | null;
  /** Lines after the header. */
  rows: number;
  /** Samples accepted by the checks. */
  samples: number;
  stored: number;
  duplicates: number;
  conflicts: number;
  /** Rejections quarantined (a wide row can give several). */
  quarantined: number;
  /** Lines with at least one rejection. */
  rejectedLines: number;
  /** Why the whole file was refused (no usable header, or nothing in it), or null. */
  fileError: CsvRejectedLine | null;
  /** The first rejections, for a summary; reasonsPath gets them all. */
  firstRejections: CsvRejectedLine[];
}

const DEFAULT_BATCH_ROWS = 5000;
// A wide file can give hundreds of samples per line; this bounds the memory of one batch.
const MAX_BATCH_SAMPLES = 100_000;
const FIRST_REJECTIONS = 100;

/** sha256 of a file, streamed: a drop file can be far larger than memory should hold. */
export async function hashFile(path: string): Promise<string> {
  const hash = createHash('sha256');
  for await (const chunk of createReadStream(path)) hash.update(chunk as Buffer);
  return hash.digest('hex');
}

function storeUnavailable(error: unknown, name: string): TrueshiftError {
  if (isTrueshiftError(error) && error.code === 'STORE_UNAVAILABLE') return error;
  const why = error instanceof Error ? error.message : String(error);
  return new TrueshiftError('STORE_UNAVAILABLE', `Importing ${name}: ${why}`, { cause: error });
}

function reasonLine(rejection: CsvRejectedLine): string {
  return `line ${rejection.line}: ${rejection.reason} [${rejection.code}]\n`;
}

/**
 * Imports one CSV file (long or wide layout) into the store, streamed line by line and committed in
 * batches. The content is recorded by hash first, so the same content is taken once; a caller
 * resuming an interrupted import passes `again`. Bad rows are quarantined and reported, good rows
 * are stored; a header that cannot be read refuses the whole file.
 */
export async function importCsvFile(path: string, deps: CsvImportDeps): Promise<CsvImportResult> {
  const { store, clock, options } = deps;
  const name = options.name ?? basename(path);
  const batchRows = options.batchRows ?? DEFAULT_BATCH_ROWS;
  const quarantinedThrough = options.quarantinedThroughLine ?? 0;
  const totalBytes = (await stat(path)).size;
  const hash = await hashFile(path);
  const result: CsvImportResult = {
    file: path,
    name,
    hash,
    bytes: totalBytes,
    alreadyTaken: false,
    interrupted: false,
    layout: null,
    rows: 0,
    samples: 0,
    stored: 0,
    duplicates: 0,
    conflicts: 0,
    quarantined: 0,
    rejectedLines: 0,
    fileError: null,
    firstRejections: [],
  };

  let fresh: boolean;
  try {
    fresh = await store.recordFile({
      hash,
      name,
      takenAt: clock(),
      summary: { bytes: totalBytes },
    });
  } catch (error) {
    throw storeUnavailable(error, name);
  }
  if (!fresh && options.again !== true) {
    result.alreadyTaken = true;
    return result;
  }

  const ranges = createValidRanges(store, clock, 0);
  try {
    await ranges.refresh(true);
  } catch (error) {
    throw storeUnavailable(error, name);
  }
  const receivedAt = clock();

  let samples: SampleInput[] = [];
  let rejections: { line: number; entry: QuarantineInput }[] = [];
  let reasons = '';
  let batchLines = 0;
  let lastLine = 0;
  const input = createReadStream(path, { encoding: 'utf8' });
  const lines = createInterface({ input, crlfDelay: Infinity });

  const reject = (line: number, entry: QuarantineInput): void => {
    rejections.push({ line, entry });
    const rejected: CsvRejectedLine = { line, code: entry.code, reason: entry.reason };
    if (result.firstRejections.length < FIRST_REJECTIONS) result.firstRejections.push(rejected);
    reasons += reasonLine(rejected);
  };

  const flush = async (): Promise<void> => {
    const toQuarantine = rejections
      .filter((rejection) => rejection.line > quarantinedThrough)
      .map((rejection) => rejection.entry);
    try {
      if (samples.length > 0) {
        const written = await store.writeSamples(samples);
        result.stored += written.inserted;
        result.duplicates += written.duplicates;
        result.conflicts += written.conflicts;
      }
      if (toQuarantine.length > 0) await store.quarantine(toQuarantine);
    } catch (error) {
      throw storeUnavailable(error, name);
    }
    result.quarantined += rejections.length;
    if (options.reasonsPath !== undefined && reasons !== '') {
      await appendFile(options.reasonsPath, reasons);
    }
    samples = [];
    rejections = [];
    reasons = '';
    batchLines = 0;
    options.onProgress?.({
      file: name,
      rows: result.rows,
      bytes: input.bytesRead,
      totalBytes,
      line: lastLine,
    });
  };

  try {
    let reader: DropCsvReader | null = null;
    let lineNumber = 0;
    for await (const line of lines) {
      lineNumber++;
      if (reader === null) {
        try {
          reader = createDropCsvReader(line, {
            fileName: name,
            receivedAt,
            now: clock(),
            maxFutureMs: options.maxFutureMs,
            validRange: ranges.lookup,
          });
        } catch (error) {
          if (!isTrueshiftError(error)) throw error;
          const detail = error.detail ?? error.message;
          const ctx = { source: `csv:${name}:1`, raw: line, receivedAt };
          const entry = buildRejection(ctx, error.code, detail, null);
          result.fileError = { line: 1, code: error.code, reason: entry.reason };
          reject(1, entry);
          result.rejectedLines = 1;
          lastLine = 1;
          break;
        }
        result.layout = reader.layout;
        lastLine = 1;
        continue;
      }
      result.rows++;
      const parsed = reader.readLine(line, lineNumber);
      for (const sample of parsed.samples) samples.push(sample);
      result.samples += parsed.samples.length;
      if (parsed.rejected.length > 0) {
        result.rejectedLines++;
        for (const entry of parsed.rejected) reject(lineNumber, entry);
      }
      lastLine = lineNumber;
      batchLines++;
      if (batchLines >= batchRows || samples.length >= MAX_BATCH_SAMPLES) {
        await flush();
        if (options.signal?.aborted === true) {
          result.interrupted = true;
          break;
        }
      }
    }
    if (!result.interrupted && result.fileError === null && result.samples === 0) {
      // Nothing usable at all: an empty file, a header alone, or only blank lines. Rows that were
      // rejected already say why; the file is refused either way.
      const reason =
        result.layout === null
          ? 'The file is empty; it has no header line.'
          : result.rejectedLines === 0
            ? 'The file has a header but no rows with samples.'
            : 'No row of the file holds a usable sample.';
      const ctx = { source: `csv:${name}:1`, raw: '', receivedAt };
      const entry = buildRejection(ctx, 'CSV_EMPTY', reason, null);
      result.fileError = { line: 1, code: 'CSV_EMPTY', reason };
      if (result.rejectedLines === 0) reject(1, entry);
    }
    await flush();
  } finally {
    lines.close();
    input.destroy();
  }
  deps.log?.debug({ result: { ...result, firstRejections: undefined } }, 'CSV import finished');
  return result;
}
