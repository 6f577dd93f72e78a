/**
 * Speed of the history import: rows per second of a 10^6-row long CSV file (10 tags) into a SQLite
 * store through `importCsvFile` (@trueshift/ingest), the path `trueshift import` takes, with the
 * settings' default maxFutureMs.
 *
 * Two baselines on the same file in the same run: reading it line by line and splitting each row
 * into its time, tag, value and quality as numbers (what any import must do); and the same
 * reading with a bare SQLite append of every row (one plain INSERT into a three-column table,
 * transactions of the same 5,000 rows as the import), the floor of a file into SQLite. The three
 * passes take turns within each run, first in turn, so slow spells of the shared machine favour
 * none of them.
 *
 * Run with `npm run build && npx tsx test/bench/import.bench.ts`.
 */
import { createReadStream, mkdtempSync, rmSync, statSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { createInterface } from 'node:readline';
import { resolveConfig } from '@trueshift/config';
import { importCsvFile } from '@trueshift/ingest';
import { openSqliteStore } from '@trueshift/store-sqlite';
import { bareDatabase, benchReport, machineLine, median, MIB } from './bench-kit.js';

const ROWS = Number(process.env.BENCH_CSV_ROWS ?? 1_000_000);
const RUNS = Number(process.env.BENCH_CSV_RUNS ?? 3);
const T0 = Date.UTC(2026, 0, 1);
/** As many rows per transaction as the import commits at a time. */
const TRANSACTION_ROWS = 5000;

function writeLongCsv(path: string, rows: number): void {
  const chunks: string[] = ['time,tag,value,quality\n'];
  let chunk = '';
  for (let i = 0; i < rows; i++) {
    chunk += `${new Date(T0 - (rows - i) * 1000).toISOString()},unit${String(i % 10)}.flow,${String((i % 997) * 0.125)},192\n`;
    if (chunk.length > 1 << 20) {
      chunks.push(chunk);
      chunk = '';
    }
  }
  chunks.push(chunk);
  writeFileSync(path, chunks.join(''));
}

interface Row {
  t: number;
  tag: string;
  value: number;
  quality: number;
}

/** Every data row of the file, split and converted, handed to `take`; gives the row count. */
async function eachRow(path: string, take: (row: Row) => void): Promise<number> {
  let rows = 0;
  let header = true;
  for await (const line of createInterface({
    input: createReadStream(path, 'utf8'),
    crlfDelay: Infinity,
  })) {
    if (header) {
      header = false;
      continue;
    }
    if (line.length === 0) continue;
    const [time = '', tag = '', value = '', quality = ''] = line.split(',');
    take({ t: Date.parse(time), tag, value: Number(value), quality: Number(quality) });
    rows++;
  }
  return rows;
}

async function readSplitRowsPerSecond(path: string): Promise<number> {
  let sink = 0;
  const start = performance.now();
  const rows = await eachRow(path, (row) => {
    sink += row.value;
  });
  const seconds = (performance.now() - start) / 1000;
  if (rows !== ROWS || Number.isNaN(sink))
    throw new Error(`read ${String(rows)} of ${String(ROWS)}`);
  return rows / seconds;
}

async function bareAppendRowsPerSecond(path: string, dbPath: string): Promise<number> {
  const db = bareDatabase(dbPath);
  try {
    db.exec('CREATE TABLE bare (tag TEXT, t INTEGER, value REAL, quality INTEGER)');
    const insert = db.prepare('INSERT INTO bare (tag, t, value, quality) VALUES (?, ?, ?, ?)');
    const append = db.transaction((rows: readonly Row[]) => {
      for (const row of rows) insert.run(row.tag, row.t, row.value, row.quality);
    });
    let pending: Row[] = [];
    const start = performance.now();
    const rows = await eachRow(path, (row) => {
      pending.push(row);
      if (pending.length >= TRANSACTION_ROWS) {
        append(pending);
        pending = [];
      }
    });
    append(pending);
    const seconds = (performance.now() - start) / 1000;
    if (rows !== ROWS) throw new Error(`appended ${String(rows)} of ${String(ROWS)}`);
    return rows / seconds;
  } finally {
    db.close();
  }
}

async function importRowsPerSecond(
  path: string,
  dbPath: string,
  maxFutureMs: number,
  run: number,
): Promise<number> {
  const store = openSqliteStore({ path: dbPath });
  try {
    const start = performance.now();
    const result = await importCsvFile(path, {
      store,
      clock: () => T0,
      options: { maxFutureMs, name: `bench-${String(run)}.csv` },
    });
    const seconds = (performance.now() - start) / 1000;
    if (result.stored !== ROWS)
      throw new Error(`stored ${String(result.stored)} of ${String(ROWS)}`);
    return ROWS / seconds;
  } finally {
    await store.close();
  }
}

const config = resolveConfig({});
if (!config.ok) throw new Error(config.problems.join('\n'));
const { maxFutureMs } = config.config.ingest;
const report = benchReport('import');
const { say } = report;
const work = mkdtempSync(join(tmpdir(), 'trueshift-bench-import-'));
try {
  const csv = join(work, 'history.csv');
  writeLongCsv(csv, ROWS);
  const readSplit: number[] = [];
  const bare: number[] = [];
  const imported: number[] = [];
  for (let run = 0; run < RUNS; run++) {
    const passes = [
      async () => {
        readSplit.push(await readSplitRowsPerSecond(csv));
      },
      async () => {
        bare.push(await bareAppendRowsPerSecond(csv, join(work, `bare-${String(run)}.db`)));
      },
      async () => {
        imported.push(
          await importRowsPerSecond(csv, join(work, `store-${String(run)}.db`), maxFutureMs, run),
        );
      },
    ];
    for (let i = 0; i < passes.length; i++) await passes[(run + i) % passes.length]?.();
    console.log(
      `  run ${String(run + 1)}: read+split ${(readSplit[run] ?? 0).toFixed(0)}, bare append ${(bare[run] ?? 0).toFixed(0)}, import ${(imported[run] ?? 0).toFixed(0)} rows/s`,
    );
  }
  const ratio = (of: number[], to: number[]): number =>
    median(of.map((x, i) => x / (to[i] ?? Number.NaN)));

  say('# History import benchmark');
  say('');
  say(machineLine());
  say('');
  say(
    `A long CSV file (time, tag, value, quality; ${ROWS.toLocaleString('en')} rows, 10 tags, ${(statSync(csv).size / MIB).toFixed(0)} MiB) into a fresh SQLite store per run through \`importCsvFile\`, as \`trueshift import\` does (content hash, every row checked, rows stored in transactions of ${TRANSACTION_ROWS.toLocaleString('en')}). Medians of ${String(RUNS)} runs; the ratios are the medians of the per-run ratios, the three passes of a run following each other within seconds on the same file.`,
  );
  say('');
  say('| pass | rows per second (median) | import / pass |');
  say('| --- | ---: | ---: |');
  say(
    `| baseline: read line by line, split, time and numbers parsed | ${median(readSplit).toFixed(0)} | ${ratio(imported, readSplit).toFixed(3)} |`,
  );
  say(
    `| baseline: the same read, and a bare SQLite append of every row | ${median(bare).toFixed(0)} | ${ratio(imported, bare).toFixed(2)} |`,
  );
  say(
    `| **history import (\`importCsvFile\` into the store)** | ${median(imported).toFixed(0)} | 1.00 |`,
  );
  say('');
  say(
    '| run | read+split (rows/s) | bare append (rows/s) | import (rows/s) | import / bare append |',
  );
  say('| ---: | ---: | ---: | ---: | ---: |');
  for (let run = 0; run < RUNS; run++) {
    say(
      `| ${String(run + 1)} | ${(readSplit[run] ?? 0).toFixed(0)} | ${(bare[run] ?? 0).toFixed(0)} | ${(imported[run] ?? 0).toFixed(0)} | ${((imported[run] ?? 0) / (bare[run] ?? Number.NaN)).toFixed(2)} |`,
    );
  }
  report.write();
} finally {
  rmSync(work, { recursive: true, force: true });
}
