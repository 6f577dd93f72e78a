/**
 * The CSV drop folder on a real folder and a real SQLite file: long and wide files, partly bad files
 * with their reasons, content taken once, files still being written, store failures and imports
 * interrupted by a crash.
 */
import {
  appendFile,
  copyFile,
  mkdir,
  mkdtemp,
  readdir,
  readFile,
  rm,
  writeFile,
} from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import {
  buildDropFolder,
  type CsvImportProgress,
  type DropFolder,
  hashFile,
  importCsvFile,
} from '@trueshift/ingest';
import type { Store } from '@trueshift/store';
import { openSqliteStore } from '@trueshift/store-sqlite';
import { captureLog } from './helpers/logs.js';
import { withWriteHook } from './helpers/store-faults.js';

const T0 = Date.UTC(2026, 0, 1);
const MINUTE = 60_000;

let dir: string;
let folder: string;
let store: Store;
let drops: DropFolder[] = [];

beforeEach(async () => {
  dir = await mkdtemp(join(tmpdir(), 'trueshift-drop-'));
  folder = join(dir, 'drop');
  await mkdir(folder);
  store = openSqliteStore({ path: join(dir, 'store.db') });
});

afterEach(async () => {
  for (const drop of drops) await drop.close();
  drops = [];
  await store.close();
  await rm(dir, { recursive: true, force: true });
});

/** A drop folder polled by the test itself (pollNow), so each step is deterministic. */
async function startDrop(
  options: { store?: Store; batchRows?: number; onProgress?: (p: CsvImportProgress) => void } = {},
): Promise<DropFolder> {
  const drop = buildDropFolder({
    store: options.store ?? store,
    log: captureLog().log,
    clock: () => T0,
    options: {
      folder,
      pollMs: 3_600_000,
      maxFutureMs: MINUTE,
      ...(options.batchRows !== undefined && { batchRows: options.batchRows }),
      ...(options.onProgress !== undefined && { onProgress: options.onProgress }),
    },
  });
  drops.push(drop);
  await drop.start();
  return drop;
}

function iso(t: number): string {
  return new Date(t).toISOString();
}

function longCsv(rows: number, tags: number): string {
  const lines = ['time,tag,value,quality'];
  for (let i = 0; i < rows; i++) {
    lines.push(`${iso(T0 - (rows - i) * 1000)},line${i % tags}.flow,${(i * 0.25).toFixed(2)},192`);
  }
  return `${lines.join('\n')}\n`;
}

async function listing(sub: string): Promise<string[]> {
  return (await readdir(join(folder, sub))).sort();
}

/** Two polls: the first sees the file, the second finds it unchanged and takes it. */
async function pollTwice(drop: DropFolder): Promise<void> {
  await drop.pollNow();
  await drop.pollNow();
}

describe('CSV drop folder', () => {
  it('imports a long file in batches, reporting progress, and moves it to processed/', async () => {
    const progress: CsvImportProgress[] = [];
    const drop = await startDrop({ batchRows: 5000, onProgress: (p) => progress.push(p) });
    const rows = 20_003;
    await writeFile(join(folder, 'historian-export.csv'), longCsv(rows, 7));
    await pollTwice(drop);

    expect(await listing('processed')).toEqual(['historian-export.csv']);
    expect(await listing('rejected')).toEqual([]);
    expect(await store.countSamples()).toBe(rows);
    expect(await store.countSamples('line3.flow')).toBe(Math.ceil((rows - 3) / 7));
    const line0 = await store.readSamples('line0.flow');
    expect(line0.value[0]).toBe(0);
    expect(line0.t[0]).toBe(T0 - rows * 1000);
    // One report per batch of 5000 lines and one at the end, counting up to the whole file.
    expect(progress.map((p) => p.rows)).toEqual([5000, 10_000, 15_000, 20_000, rows]);
    const last = progress[progress.length - 1];
    expect(last?.bytes).toBe(last?.totalBytes);
    expect(drop.health()).toMatchObject({ filesProcessed: 1, stored: rows, healthy: true });
  });

  it('imports a wide file, one column per tag, leaving empty cells out', async () => {
    const drop = await startDrop();
    const tags = Array.from({ length: 40 }, (_, i) => `press${i}.temp`);
    const lines = [`timestamp;${tags.join(';')}`];
    let expected = 0;
    for (let r = 0; r < 1500; r++) {
      const cells = tags.map((_, c) => ((r + c) % 9 === 0 ? '' : String(100 + r + c / 10)));
      expected += cells.filter((cell) => cell !== '').length;
      lines.push(`${iso(T0 - (1500 - r) * MINUTE)};${cells.join(';')}`);
    }
    await writeFile(join(folder, 'presses.csv'), `${lines.join('\r\n')}\r\n`);
    await pollTwice(drop);

    expect(await listing('processed')).toEqual(['presses.csv']);
    expect(await store.countSamples()).toBe(expected);
    const press7 = await store.readSamples('press7.temp');
    expect(press7.value[1]).toBeCloseTo(101.7, 10);
    expect((await store.listTags()).length).toBe(40);
  });

  it('imports the good rows of a partly bad file and rejects it with a reasons file of line numbers', async () => {
    const drop = await startDrop();
    const csv = [
      'time,tag,value',
      `${iso(T0 - 4 * MINUTE)},dryer.moisture,4.1`,
      `${iso(T0 - 3 * MINUTE)},dryer.moisture,abc`,
      `${iso(T0 - 2 * MINUTE)},dryer.moisture`,
      `yesterday,dryer.moisture,4.3`,
      `${iso(T0 - MINUTE)},dryer.moisture,4.4`,
      '',
      `${iso(T0 + 10 * MINUTE)},dryer.moisture,4.5`,
      `${iso(T0)},dryer.moisture,"4,6"`,
    ].join('\n');
    await writeFile(join(folder, 'dryer.csv'), csv);
    await pollTwice(drop);

    expect(await listing('rejected')).toEqual(['dryer.csv', 'dryer.csv.reasons.txt']);
    expect(await listing('processed')).toEqual([]);
    expect(Array.from((await store.readSamples('dryer.moisture')).value)).toEqual([4.1, 4.4]);
    const reasons = (await readFile(join(folder, 'rejected', 'dryer.csv.reasons.txt'), 'utf8'))
      .trim()
      .split('\n');
    expect(reasons).toHaveLength(5);
    expect(reasons[0]).toMatch(/^line 3: The value "abc" is not a number\. \[VALUE_NOT_NUMBER\]$/);
    expect(reasons[1]).toMatch(
      /^line 4: Expected 3 cells like the header, found 2\. \[CSV_BAD_ROW\]$/,
    );
    expect(reasons[2]).toMatch(/^line 5: .*"yesterday".* \[TIME_UNREADABLE\]$/);
    expect(reasons[3]).toMatch(/^line 8: .*later than now plus 60000 ms.* \[TIME_IN_FUTURE\]$/);
    expect(reasons[4]).toMatch(/^line 9: .*decimal comma.* \[VALUE_NOT_NUMBER\]$/);
    // The bad rows are in the quarantine as well, each with its line.
    const quarantine = await store.listQuarantine();
    expect(quarantine.map((entry) => entry.source).sort()).toEqual([
      'csv:dryer.csv:3',
      'csv:dryer.csv:4',
      'csv:dryer.csv:5',
      'csv:dryer.csv:8',
      'csv:dryer.csv:9',
    ]);
    expect(drop.health()).toMatchObject({ filesRejected: 1, stored: 2, quarantined: 5 });
  });

  it('rejects a file whose header cannot be read, with the reason, and stores nothing from it', async () => {
    const drop = await startDrop();
    await writeFile(join(folder, 'odd.csv'), 'when,tag\n2026-01-01T00:00:00Z,a\n');
    await writeFile(join(folder, 'empty.csv'), '');
    await pollTwice(drop);

    expect(await listing('rejected')).toEqual([
      'empty.csv',
      'empty.csv.reasons.txt',
      'odd.csv',
      'odd.csv.reasons.txt',
    ]);
    const odd = await readFile(join(folder, 'rejected', 'odd.csv.reasons.txt'), 'utf8');
    expect(odd).toMatch(/^line 1: .*"tag" column but no "value" column.*\[CSV_BAD_HEADER\]\n$/);
    const empty = await readFile(join(folder, 'rejected', 'empty.csv.reasons.txt'), 'utf8');
    expect(empty).toBe('line 1: The file is empty; it has no header line. [CSV_EMPTY]\n');
    expect(await store.countSamples()).toBe(0);
    expect((await store.listQuarantine()).map((entry) => entry.code).sort()).toEqual([
      'CSV_BAD_HEADER',
      'CSV_EMPTY',
    ]);
  });

  it('takes the same content once: a repeat goes to processed/ with a note, and a reused name is kept apart', async () => {
    const drop = await startDrop();
    const content = longCsv(50, 2);
    await writeFile(join(folder, 'shift-a.csv'), content);
    await pollTwice(drop);
    await writeFile(join(folder, 'shift-a-copy.csv'), content);
    await pollTwice(drop);
    // The same file name again, with new content: both files are kept.
    await writeFile(join(folder, 'shift-a.csv'), `${content}${iso(T0)},line0.flow,99,192\n`);
    await pollTwice(drop);

    expect(await listing('processed')).toEqual([
      'shift-a-1.csv',
      'shift-a-copy.csv',
      'shift-a-copy.csv.note.txt',
      'shift-a.csv',
    ]);
    const note = await readFile(join(folder, 'processed', 'shift-a-copy.csv.note.txt'), 'utf8');
    expect(note).toMatch(/^already taken: a file with the same content \(sha256 [0-9a-f]{64}\)/);
    expect(await store.countSamples()).toBe(51);
    expect(drop.health()).toMatchObject({ filesProcessed: 2, filesRepeated: 1, duplicates: 50 });
  });

  it('does not take a file that is still being written, nor .part, .tmp or hidden files', async () => {
    const drop = await startDrop();
    const path = join(folder, 'growing.csv');
    const lines = longCsv(20, 1).split('\n');
    await writeFile(path, `${lines.slice(0, 11).join('\n')}\n`);
    await writeFile(join(folder, 'next.csv.part'), longCsv(5, 1));
    await writeFile(join(folder, 'next.csv.tmp'), longCsv(5, 1));
    await writeFile(join(folder, '.next.csv'), longCsv(5, 1));
    await drop.pollNow();
    expect(await store.countSamples()).toBe(0);
    await appendFile(path, lines.slice(11).join('\n'));
    await drop.pollNow();
    // Changed since the last poll: still not taken.
    expect((await readdir(folder)).sort()).toContain('growing.csv');
    expect(await store.countSamples()).toBe(0);
    await drop.pollNow();
    await drop.pollNow();
    expect(await store.countSamples()).toBe(20);
    expect(await listing('processed')).toEqual(['growing.csv']);
    expect((await readdir(folder)).sort()).toEqual([
      '.next.csv',
      'next.csv.part',
      'next.csv.tmp',
      'processed',
      'processing',
      'rejected',
    ]);
  });

  it('keeps a file in processing/ while the store fails and finishes it later without quarantining twice', async () => {
    const flaky = withWriteHook(store, ({ call }) => {
      if (call === 2) throw new Error('injected: disk full');
    });
    const drop = await startDrop({ store: flaky, batchRows: 2 });
    const csv = [
      'time,tag,value',
      `${iso(T0 - 5000)},kiln.temp,800`,
      `${iso(T0 - 4000)},kiln.temp,bad`,
      `${iso(T0 - 3000)},kiln.temp,802`,
      `${iso(T0 - 2000)},kiln.temp,worse`,
      `${iso(T0 - 1000)},kiln.temp,804`,
    ].join('\n');
    await writeFile(join(folder, 'kiln.csv'), csv);
    await pollTwice(drop);
    expect(await listing('processing')).toEqual(['.kiln.csv.reasons.txt', 'kiln.csv']);
    expect(drop.health()).toMatchObject({ healthy: false });
    expect(drop.health().lastError).toContain('injected: disk full');
    expect(await store.countQuarantine()).toBe(1);

    await drop.pollNow();
    expect(await listing('processing')).toEqual([]);
    expect(await listing('rejected')).toEqual(['kiln.csv', 'kiln.csv.reasons.txt']);
    expect(Array.from((await store.readSamples('kiln.temp')).value)).toEqual([800, 802, 804]);
    expect(await store.countQuarantine()).toBe(2);
    const reasons = await readFile(join(folder, 'rejected', 'kiln.csv.reasons.txt'), 'utf8');
    expect(
      reasons
        .trim()
        .split('\n')
        .map((line) => line.split(':')[0]),
    ).toEqual(['line 3', 'line 5']);
    expect(drop.health().healthy).toBe(true);
  });

  it('stops a long import between batches on close, and finishes it at the next start', async () => {
    const closing: { done?: Promise<void> } = {};
    const drop: DropFolder = await startDrop({
      batchRows: 1000,
      onProgress: () => {
        closing.done ??= drop.close();
      },
    });
    await writeFile(join(folder, 'week.csv'), longCsv(10_000, 4));
    await drop.pollNow();
    await drop.pollNow();
    await closing.done;
    expect(await listing('processing')).toContain('week.csv');
    const partial = await store.countSamples();
    expect(partial).toBeGreaterThan(0);
    expect(partial).toBeLessThan(10_000);

    await startDrop();
    expect(await listing('processing')).toEqual([]);
    expect(await listing('processed')).toEqual(['week.csv']);
    expect(await store.countSamples()).toBe(10_000);
  });

  it('finishes at start an import that a crash interrupted, though its content was already recorded', async () => {
    await mkdir(join(folder, 'processing'), { recursive: true });
    const path = join(folder, 'processing', 'night.csv');
    await writeFile(path, longCsv(300, 3));
    await store.recordFile({
      hash: await hashFile(path),
      name: 'night.csv',
      takenAt: T0,
      summary: {},
    });
    await startDrop();
    expect(await listing('processed')).toEqual(['night.csv']);
    expect(await store.countSamples()).toBe(300);
  });
});

describe('importCsvFile', () => {
  it('imports a file once by content, and again only when asked, as replays', async () => {
    const path = join(dir, 'lab-results.csv');
    await writeFile(path, longCsv(10, 1));
    const deps = { store, clock: () => T0, options: { maxFutureMs: MINUTE } };
    const first = await importCsvFile(path, deps);
    expect(first).toMatchObject({ alreadyTaken: false, layout: 'long', rows: 10, stored: 10 });
    const copy = join(dir, 'lab-results-copy.csv');
    await copyFile(path, copy);
    const second = await importCsvFile(copy, deps);
    expect(second).toMatchObject({ alreadyTaken: true, rows: 0, stored: 0, hash: first.hash });
    const again = await importCsvFile(copy, {
      ...deps,
      options: { maxFutureMs: MINUTE, again: true },
    });
    expect(again).toMatchObject({ alreadyTaken: false, stored: 0, duplicates: 10 });
    expect(await store.countSamples()).toBe(10);
  });
});
