/**
 * What several benchmarks share: the median and quantiles of repeated runs, the machine line every
 * result file starts with, the result file itself (each line echoed, so a long run shows its
 * progress), and the bare SQLite database the store's baselines append to.
 */
import { writeFileSync } from 'node:fs';
import Database from 'better-sqlite3';
import { cpus, loadavg, totalmem } from 'node:os';
import { fileURLToPath } from 'node:url';

export function median(values: readonly number[]): number {
  const sorted = [...values].sort((a, b) => a - b);
  const mid = sorted.length >> 1;
  return sorted.length % 2 === 1
    ? (sorted[mid] ?? Number.NaN)
    : ((sorted[mid - 1] ?? 0) + (sorted[mid] ?? 0)) / 2;
}

/** The nearest-rank quantile: always one of the values measured, never an interpolation. */
export function quantile(values: readonly number[], q: number): number {
  const sorted = [...values].sort((a, b) => a - b);
  return sorted[Math.min(sorted.length - 1, Math.floor(q * sorted.length))] ?? Number.NaN;
}

/** CPU, cores, memory, Node.js, the time and the load average: the figures mean little without. */
export function machineLine(): string {
  const cpu = cpus()[0]?.model ?? 'unknown CPU';
  const load = loadavg()
    .map((x) => x.toFixed(1))
    .join(', ');
  return `Machine: ${cpu}, ${String(cpus().length)} cores, ${(totalmem() / 2 ** 30).toFixed(0)} GiB, Node.js ${process.version}; ${new Date().toISOString()}; load average at the start (1, 5, 15 min) ${load}.`;
}

export interface BenchReport {
  say: (line: string) => void;
  /** Writes test/bench/results/<name>.md; gives its path. */
  write: () => string;
}

export function benchReport(name: string): BenchReport {
  const lines: string[] = [];
  return {
    say: (line) => {
      console.log(line);
      lines.push(line);
    },
    write: () => {
      const out = fileURLToPath(new URL(`./results/${name}.md`, import.meta.url));
      writeFileSync(out, `${lines.join('\n')}\n`);
      console.log(`\nWritten to ${out}`);
      return out;
    },
  };
}

export const MIB = 2 ** 20;

/** The same pragmas as the store, so a bare baseline differs only in what it does per row. */
export function bareDatabase(path: string): Database.Database {
  const db = new Database(path);
  db.pragma('journal_mode = WAL');
  db.pragma('synchronous = NORMAL');
  return db;
}
