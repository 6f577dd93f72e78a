import type { CsvImportProgress } from '@trueshift/ingest';
import { grouped } from './format.js';

const BAR_WIDTH = 24;
/** Redraws at most this often: a terminal redrawn per batch of a fast import only flickers. */
const REDRAW_MS = 100;

/** One line of an import's progress: the bar by bytes read, rows so far and the rate. */
export function progressLine(progress: CsvImportProgress, elapsedMs: number): string {
  const share =
    progress.totalBytes > 0 ? Math.min(1, Math.max(0, progress.bytes / progress.totalBytes)) : 1;
  const filled = Math.round(share * BAR_WIDTH);
  const bar = `${'#'.repeat(filled)}${'.'.repeat(BAR_WIDTH - filled)}`;
  const rate = elapsedMs > 0 ? (progress.rows * 1000) / elapsedMs : 0;
  return `${progress.file} [${bar}] ${String(Math.floor(share * 100)).padStart(3)}%  ${grouped(progress.rows)} rows  ${grouped(rate)} rows/s`;
}

export interface ProgressBar {
  update(progress: CsvImportProgress): void;
  /** Takes the bar off the line, so what is printed next starts clean. */
  finish(): void;
}

/** A progress bar on a terminal, redrawn in place; `write` is the terminal's stderr. */
export function createProgressBar(write: (text: string) => void, clock: () => number): ProgressBar {
  const started = clock();
  let drawnAt = Number.NEGATIVE_INFINITY;
  let drawn = false;
  return {
    update(progress) {
      const now = clock();
      const last = progress.totalBytes > 0 && progress.bytes >= progress.totalBytes;
      if (!last && now - drawnAt < REDRAW_MS) return;
      drawnAt = now;
      drawn = true;
      // \r returns to the line's start and ESC [K clears what a longer earlier line left.
      write(`\r${progressLine(progress, now - started)}\u001b[K`);
    },
    finish() {
      if (drawn) write('\r\u001b[K');
    },
  };
}
