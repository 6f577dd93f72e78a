import { access, mkdir, readdir, rename, rm, stat, writeFile } from 'node:fs/promises';
import { extname, join } from 'node:path';
import type { Store } from '@trueshift/store';
import type { Logger } from 'pino';
import { type CsvImportProgress, type CsvImportResult, importCsvFile } from './csv-import.js';

export interface DropFolderOptions {
  folder: string;
  pollMs: number;
  maxFutureMs: number;
  /** Lines per store transaction; 5000 by default. */
  batchRows?: number;
  onProgress?: (progress: CsvImportProgress) => void;
}

export interface DropFolderDeps {
  store: Store;
  log: Logger;
  clock: () => number;
  options: DropFolderOptions;
}

export interface DropFolderHealth {
  running: boolean;
  /** The last poll and the last import worked. */
  healthy: boolean;
  lastError: string | null;
  lastErrorAt: number | null;
  /** The file being imported now, if any. */
  busy: string | null;
  filesProcessed: number;
  filesRejected: number;
  filesRepeated: number;
  rows: number;
  stored: number;
  duplicates: number;
  conflicts: number;
  quarantined: number;
}

export interface DropFolder {
  /** Creates the sub-folders, finishes imports a previous run left, and starts polling. */
  start(): Promise<void>;
  /** One poll now (waits for a poll already running instead of starting a second). */
  pollNow(): Promise<void>;
  /** Stops polling; an import under way stops after its current batch and resumes next start. */
  close(): Promise<void>;
  health(): DropFolderHealth;
}

/** Files taken from the folder wait here while imported; whatever is left here was interrupted. */
export const PROCESSING_DIR = 'processing';
export const PROCESSED_DIR = 'processed';
export const REJECTED_DIR = 'rejected';

/** Names a writer uses while a file is not finished, by common convention. */
function skipped(name: string): boolean {
  return name.startsWith('.') || name.endsWith('.tmp') || name.endsWith('.part');
}

async function exists(path: string): Promise<boolean> {
  try {
    await access(path);
    return true;
  } catch {
    return false;
  }
}

/** A name not yet used in `dir`: "a.csv", else "a-1.csv", "a-2.csv", ... (plants reuse export names). */
async function freeName(
  dir: string,
  name: string,
  alsoFree: readonly string[] = [],
): Promise<string> {
  const ext = extname(name);
  const stem = name.slice(0, name.length - ext.length);
  for (let n = 0; ; n++) {
    const candidate = n === 0 ? name : `${stem}-${n}${ext}`;
    const taken = await exists(join(dir, candidate));
    const sideTaken = await Promise.all(
      alsoFree.map((suffix) => exists(join(dir, candidate + suffix))),
    );
    if (!taken && !sideTaken.includes(true)) return candidate;
  }
}

function describe(error: unknown): string {
  return error instanceof Error ? error.message : String(error);
}

/**
 * Polls a folder for CSV drop files. A file is taken once its size and modification time held
 * still between two polls (a writer that pauses longer than pollMs should write to a .tmp or .part
 * name and rename). It is moved to processing/, imported, and moved to processed/ when every row was
 * good, or to rejected/ with "<name>.reasons.txt" otherwise; its good rows are imported either way.
 */
export function buildDropFolder(deps: DropFolderDeps): DropFolder {
  const { store, log, clock, options } = deps;
  const folder = options.folder;
  const processingDir = join(folder, PROCESSING_DIR);
  const processedDir = join(folder, PROCESSED_DIR);
  const rejectedDir = join(folder, REJECTED_DIR);

  const seen = new Map<string, { size: number; mtimeMs: number }>();
  /** Imports interrupted in this process: their rejections up to this line are in the quarantine. */
  const quarantinedThrough = new Map<string, number>();
  const health: DropFolderHealth = {
    running: false,
    healthy: true,
    lastError: null,
    lastErrorAt: null,
    busy: null,
    filesProcessed: 0,
    filesRejected: 0,
    filesRepeated: 0,
    rows: 0,
    stored: 0,
    duplicates: 0,
    conflicts: 0,
    quarantined: 0,
  };
  let timer: NodeJS.Timeout | undefined;
  let polling: Promise<void> | null = null;
  let closing = false;
  const abort = new AbortController();

  const fail = (message: string, error: unknown): void => {
    health.healthy = false;
    health.lastError = `${message}: ${describe(error)}`;
    health.lastErrorAt = clock();
    log.error({ err: error, folder }, `Drop folder: ${message}`);
  };

  const reasonsTemp = (name: string): string => join(processingDir, `.${name}.reasons.txt`);

  /** Moves a finished file out of processing/, with its reasons or note beside it. */
  const finish = async (name: string, result: CsvImportResult): Promise<void> => {
    const source = join(processingDir, name);
    const reasons = reasonsTemp(name);
    if (result.alreadyTaken) {
      const target = await freeName(processedDir, name, ['.note.txt']);
      await rename(source, join(processedDir, target));
      await writeFile(
        join(processedDir, `${target}.note.txt`),
        `already taken: a file with the same content (sha256 ${result.hash}) was imported before; nothing was imported from this one.\n`,
      );
      await rm(reasons, { force: true });
      health.filesRepeated++;
      log.info({ file: name }, 'Drop folder: already taken, moved to processed/');
      return;
    }
    const allGood = result.fileError === null && result.quarantined === 0 && result.conflicts === 0;
    if (allGood) {
      const target = await freeName(processedDir, name);
      await rename(source, join(processedDir, target));
      await rm(reasons, { force: true });
      health.filesProcessed++;
      log.info({ file: name, rows: result.rows, stored: result.stored }, 'Drop folder: imported');
      return;
    }
    if (result.conflicts > 0) {
      // The store quarantines conflicts itself without telling which line held them.
      const line = `${result.conflicts} sample(s) have a different value than the one already stored for their tag and time; the stored values were kept (quarantined as SAMPLE_CONFLICT).\n`;
      await writeFile(reasons, line, { flag: 'a' });
    }
    const target = await freeName(rejectedDir, name, ['.reasons.txt']);
    await rename(source, join(rejectedDir, target));
    await rename(reasons, join(rejectedDir, `${target}.reasons.txt`));
    health.filesRejected++;
    log.warn(
      {
        file: name,
        rows: result.rows,
        stored: result.stored,
        rejectedLines: result.rejectedLines,
        fileError: result.fileError?.reason,
      },
      'Drop folder: moved to rejected/ with its reasons',
    );
  };

  /** Imports a file already in processing/; `again` when a previous run may have recorded it. */
  const importFile = async (name: string, again: boolean): Promise<void> => {
    const reasons = reasonsTemp(name);
    // Every run writes the whole reasons list anew, including the lines an earlier run committed.
    await writeFile(reasons, '');
    let committedLine = quarantinedThrough.get(name) ?? 0;
    health.busy = name;
    let result: CsvImportResult;
    try {
      result = await importCsvFile(join(processingDir, name), {
        store,
        clock,
        log,
        options: {
          name,
          maxFutureMs: options.maxFutureMs,
          ...(options.batchRows !== undefined && { batchRows: options.batchRows }),
          again,
          quarantinedThroughLine: committedLine,
          reasonsPath: reasons,
          signal: abort.signal,
          onProgress: (progress) => {
            committedLine = Math.max(committedLine, progress.line);
            options.onProgress?.(progress);
          },
        },
      });
    } catch (error) {
      // Left in processing/ and tried again at the next poll; samples already committed are
      // replays then, and rejections already quarantined are not written twice.
      quarantinedThrough.set(name, committedLine);
      fail(`cannot import ${name}; it stays in ${PROCESSING_DIR}/ and is tried again`, error);
      return;
    } finally {
      health.busy = null;
    }
    if (result.interrupted) {
      quarantinedThrough.set(name, committedLine);
      return;
    }
    quarantinedThrough.delete(name);
    health.rows += result.rows;
    health.stored += result.stored;
    health.duplicates += result.duplicates;
    health.conflicts += result.conflicts;
    health.quarantined += result.quarantined;
    await finish(name, result);
    health.healthy = true;
  };

  const resumeInterrupted = async (): Promise<void> => {
    for (const entry of await readdir(processingDir, { withFileTypes: true })) {
      if (closing) return;
      if (!entry.isFile() || skipped(entry.name)) continue;
      log.info({ file: entry.name }, 'Drop folder: finishing an import that was interrupted');
      await importFile(entry.name, true);
    }
  };

  const takeStableFiles = async (): Promise<void> => {
    const entries = await readdir(folder, { withFileTypes: true });
    const present = new Set<string>();
    for (const entry of entries) {
      if (closing) return;
      if (!entry.isFile() || skipped(entry.name)) continue;
      present.add(entry.name);
      const path = join(folder, entry.name);
      let info;
      try {
        info = await stat(path);
      } catch {
        continue; // Gone between readdir and stat: a writer renamed or removed it.
      }
      const before = seen.get(entry.name);
      const now = { size: info.size, mtimeMs: info.mtimeMs };
      seen.set(entry.name, now);
      if (before?.size !== now.size || before.mtimeMs !== now.mtimeMs) continue;
      seen.delete(entry.name);
      const name = await freeName(processingDir, entry.name);
      await rename(path, join(processingDir, name));
      await importFile(name, false);
    }
    for (const name of seen.keys()) if (!present.has(name)) seen.delete(name);
  };

  const poll = async (): Promise<void> => {
    try {
      await resumeInterrupted();
      await takeStableFiles();
    } catch (error) {
      fail('cannot read the drop folder', error);
    }
  };

  const pollNow = (): Promise<void> => {
    polling ??= poll().finally(() => {
      polling = null;
    });
    return polling;
  };

  const loop = (): void => {
    if (closing) return;
    timer = setTimeout(() => {
      void pollNow().finally(loop);
    }, options.pollMs);
  };

  return {
    async start() {
      for (const dir of [processingDir, processedDir, rejectedDir]) {
        await mkdir(dir, { recursive: true });
      }
      health.running = true;
      await pollNow();
      loop();
    },
    pollNow,
    async close() {
      closing = true;
      abort.abort();
      if (timer !== undefined) clearTimeout(timer);
      await polling;
      health.running = false;
    },
    health: () => ({ ...health }),
  };
}
