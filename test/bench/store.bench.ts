/**
 * Speed of the SQLite store: batched sample ingest with 10, 1,000 and 10,000 tags, and reading one
 * tag's 10^6 samples. Each figure is the median of several runs and is set beside bare better-sqlite3
 * doing the least that job needs, measured in the same run, because this machine is shared and its
 * absolute speed varies from run to run.
 *
 * Run: npx tsx test/bench/store.bench.ts (after `npm run build`).
 */
import { copyFileSync, mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { cpus, tmpdir, totalmem } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import Database from 'better-sqlite3';
import type { SampleInput } from '@trueshift/store';
import { openSqliteStore } from '@trueshift/store-sqlite';
import { bareDatabase, median } from './bench-kit.js';

const BATCH = 500;
const WRITE_TOTAL = 100_000;
const HISTORY = 200;
const WRITE_RUNS = 5;
const READ_N = 1_000_000;
const READ_RUNS = 7;
const T0 = Date.UTC(2026, 0, 1);

function elapsedMs(work: () => void): number {
  const start = process.hrtime.bigint();
  work();
  return Number(process.hrtime.bigint() - start) / 1e6;
}

async function elapsedMsAsync(work: () => Promise<void>): Promise<number> {
  const start = process.hrtime.bigint();
  await work();
  return Number(process.hrtime.bigint() - start) / 1e6;
}

/** Round-robin over the tags, one sample per tag per minute, as a plant's scan would arrive. */
function makeBatches(tags: number, firstMinute: number): SampleInput[][] {
  const batches: SampleInput[][] = [];
  for (let start = 0; start < WRITE_TOTAL; start += BATCH) {
    const batch: SampleInput[] = [];
    for (let i = start; i < start + BATCH; i++) {
      const t = T0 + (firstMinute + Math.floor(i / tags)) * 60_000;
      batch.push({
        tag: `plant.unit${i % tags}`,
        t,
        value: Math.sin(i) * 10 + 50,
        quality: 192,
        source: 'bench',
        receivedAt: t,
      });
    }
    batches.push(batch);
  }
  return batches;
}

/**
 * A closed store file whose tags exist and, with `history`, already hold that many samples each,
 * written tag by tag (as a history import would) so that building it is quick.
 */
async function baseFile(dir: string, tags: number, history: number): Promise<string> {
  const path = join(dir, `base-${tags}-${history}.db`);
  const store = openSqliteStore({ path });
  const names = Array.from({ length: tags }, (_, i) => `plant.unit${i}`);
  await store.ensureTags(names, T0);
  let batch: SampleInput[] = [];
  for (const tag of names) {
    for (let minute = 0; minute < history; minute++) {
      const t = T0 + minute * 60_000;
      batch.push({ tag, t, value: minute % 13, quality: 192, source: 'history', receivedAt: t });
    }
    if (batch.length >= 20_000) {
      await store.writeSamples(batch);
      batch = [];
    }
  }
  await store.writeSamples(batch);
  await store.close();
  return path;
}

async function storeWriteMs(base: string, batches: readonly SampleInput[][]): Promise<number> {
  const path = `${base}.run`;
  copyFileSync(base, path);
  try {
    const store = openSqliteStore({ path });
    const ms = await elapsedMsAsync(async () => {
      for (const batch of batches) await store.writeSamples(batch);
    });
    await store.close();
    return ms;
  } finally {
    rmSync(path, { force: true });
  }
}

function bareWriteMs(dir: string, batches: readonly SampleInput[][]): number {
  const path = join(dir, 'bare.db');
  const db = bareDatabase(path);
  try {
    db.exec('CREATE TABLE bare (t INTEGER, value REAL)');
    const insert = db.prepare('INSERT INTO bare (t, value) VALUES (?, ?)');
    const write = db.transaction((batch: readonly SampleInput[]) => {
      for (const sample of batch) insert.run(sample.t, sample.value);
    });
    return elapsedMs(() => {
      for (const batch of batches) write(batch);
    });
  } finally {
    db.close();
    rmSync(path, { force: true });
  }
}

const lines: string[] = [];
const say = (line: string): void => {
  console.log(line);
  lines.push(line);
};

const cpu = cpus()[0]?.model ?? 'unknown CPU';
say('# Store benchmark (SQLite)');
say('');
say(
  `Machine: ${cpu}, ${cpus().length} cores, ${(totalmem() / 2 ** 30).toFixed(0)} GiB, Node.js ${process.version}; ${new Date().toISOString()}.`,
);
say(
  'Medians of repeated runs on files in the temporary directory. Baselines use bare better-sqlite3 on the same kind of file with the same journal settings, in the same run.',
);
say('');
say(`## Ingest: ${WRITE_TOTAL.toLocaleString('en')} samples in batches of ${BATCH}`);
say('');
say(
  'The store runs `writeSamples`: one transaction per batch, with the replay and conflict check, into the (tag, time) primary key and the seq index. The baseline appends the same (time, value) rows to a two-column table with a plain INSERT, one transaction per batch. Samples arrive round-robin over the tags, one per tag per minute, as a scan would. "Empty" starts from a store that knows the tags but holds no samples; "with history" from one where every tag already holds ' +
    `${HISTORY} samples, so that each tag's newest samples sit on a leaf page of their own, as they do in a store that has been running.`,
);
say('');
say(
  '| tags | store, empty (samples/s) | store, with history (samples/s) | bare append (samples/s) | empty / bare | with history / bare |',
);
say('| ---: | ---: | ---: | ---: | ---: | ---: |');

for (const tags of [10, 1_000, 10_000]) {
  const dir = mkdtempSync(join(tmpdir(), 'trueshift-bench-'));
  try {
    const empty = await baseFile(dir, tags, 0);
    const full = await baseFile(dir, tags, HISTORY);
    const fresh = makeBatches(tags, 0);
    const later = makeBatches(tags, HISTORY);
    const rates = { empty: [] as number[], full: [] as number[], bare: [] as number[] };
    const ratios = { empty: [] as number[], full: [] as number[] };
    // An unmeasured pass warms the optimising compiler and the file system.
    await storeWriteMs(empty, fresh.slice(0, 20));
    for (let run = 0; run < WRITE_RUNS; run++) {
      const emptyRate = WRITE_TOTAL / ((await storeWriteMs(empty, fresh)) / 1000);
      const fullRate = WRITE_TOTAL / ((await storeWriteMs(full, later)) / 1000);
      const bareRate = WRITE_TOTAL / (bareWriteMs(dir, fresh) / 1000);
      rates.empty.push(emptyRate);
      rates.full.push(fullRate);
      rates.bare.push(bareRate);
      ratios.empty.push(emptyRate / bareRate);
      ratios.full.push(fullRate / bareRate);
    }
    const rate = (values: number[]): string => Math.round(median(values)).toLocaleString('en');
    say(
      `| ${tags.toLocaleString('en')} | ${rate(rates.empty)} | ${rate(rates.full)} | ${rate(rates.bare)} | ${median(ratios.empty).toFixed(2)} | ${median(ratios.full).toFixed(2)} |`,
    );
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}

say('');
say(`## Reading one tag's ${READ_N.toLocaleString('en')} samples`);
say('');
say(
  'The store file also holds 100,000 samples of a second tag. `readSamples` returns three typed columns; the bare SELECTs read the same rows on a second connection: once stepping through raw rows without keeping them (the floor), once as `.all()` objects (the obvious way).',
);
say('');
say('| read | ms | store / read |');
say('| --- | ---: | ---: |');

await (async () => {
  const dir = mkdtempSync(join(tmpdir(), 'trueshift-bench-'));
  try {
    const path = join(dir, 'store.db');
    const store = openSqliteStore({ path });
    for (let start = 0; start < READ_N; start += 50_000) {
      const batch: SampleInput[] = [];
      for (let i = start; i < start + 50_000; i++) {
        const t = T0 + i * 1000;
        batch.push({ tag: 'big', t, value: i % 97, quality: 192, source: 'b', receivedAt: t });
        if (i % 10 === 0) {
          batch.push({ tag: 'other', t, value: 1, quality: 192, source: 'b', receivedAt: t });
        }
      }
      await store.writeSamples(batch);
    }
    const bare = new Database(path, { readonly: true });
    const tagId = bare.prepare('SELECT id FROM tags WHERE name = ?').pluck().get('big');
    const sql = 'SELECT t, value, quality FROM samples WHERE tag_id = ? ORDER BY t';
    const rawRows = bare.prepare(sql).raw(true);
    const objectRows = bare.prepare(sql);

    const storeMs: number[] = [];
    const floorMs: number[] = [];
    const objectMs: number[] = [];
    const latestMs: number[] = [];
    for (let run = 0; run < READ_RUNS; run++) {
      let n = 0;
      storeMs.push(
        await elapsedMsAsync(async () => {
          n = (await store.readSamples('big')).t.length;
        }),
      );
      if (n !== READ_N) throw new Error(`read ${n} samples, expected ${READ_N}`);
      floorMs.push(
        elapsedMs(() => {
          let rows = 0;
          let sum = 0;
          for (const row of rawRows.iterate(tagId) as Iterable<[number, number, number]>) {
            sum += row[1];
            rows++;
          }
          if (Number.isNaN(sum)) console.log('');
          if (rows !== READ_N) throw new Error(`bare read ${rows}`);
        }),
      );
      objectMs.push(
        elapsedMs(() => {
          if (objectRows.all(tagId).length !== READ_N) throw new Error('bare all');
        }),
      );
      latestMs.push(
        await elapsedMsAsync(async () => {
          await store.readSamples('big', { limit: 10_000, goodOnly: true });
        }),
      );
    }
    const storeRead = median(storeMs);
    say(`| store \`readSamples\` (three typed columns) | ${storeRead.toFixed(0)} | 1.00 |`);
    say(
      `| bare SELECT, raw rows stepped through | ${median(floorMs).toFixed(0)} | ${(storeRead / median(floorMs)).toFixed(2)} |`,
    );
    say(
      `| bare SELECT, \`.all()\` as objects | ${median(objectMs).toFixed(0)} | ${(storeRead / median(objectMs)).toFixed(2)} |`,
    );
    say(
      `| store \`readSamples\`, latest 10,000 good samples | ${median(latestMs).toFixed(1)} | — |`,
    );
    bare.close();
    await store.close();
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
})();

const out = fileURLToPath(new URL('./results/store.md', import.meta.url));
writeFileSync(out, `${lines.join('\n')}\n`);
console.log(`\nWritten to ${out}`);
