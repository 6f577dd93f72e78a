import { mkdtemp, readFile, rm, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { CAUTION, EXIT, processIo, runCli } from '../services/cli/src/index.js';
import type { AnalyseReport, CliIo } from '../services/cli/src/index.js';

let dir: string;

beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'trueshift-cli-'));
});
afterAll(async () => {
  await rm(dir, { recursive: true, force: true });
});

/** The real file system, with the printed text captured. */
async function run(argv: string[]): Promise<{ code: number; out: string; err: string }> {
  let out = '';
  let err = '';
  const io: CliIo = {
    ...processIo,
    stdout: (text) => (out += text),
    stderr: (text) => (err += text),
  };
  const code = await runCli(argv, { io });
  return { code, out, err };
}

const bhhPath = new URL('./fixtures/reference/bhh-table-3.2-batch-yields.csv', import.meta.url);

describe('trueshift analyse', () => {
  it('reproduces the reference risk of Box, Hunter & Hunter from a history file', async () => {
    // Box, Hunter & Hunter, Statistics for Experimenters, 2nd ed., §3.1 (Table 3.2 and the reference
    // set of 191 differences): 9 of 191 differences are at or above the observed 1.30, risk 0.047.
    // The file is the 210 published yields followed by ten samples built to sit exactly 1.30 above the
    // last ten, so the observed difference is the book's 1.30.
    const text = await readFile(bhhPath, 'utf8');
    const rows = text.trim().split('\n');
    const lastTen = rows.slice(-10).map((row) => Number(row.split(',')[1]));
    const after = lastTen.map((value, i) => `${211 + i},${(value + 1.3).toFixed(2)}`);
    const file = join(dir, 'yields.csv');
    await writeFile(file, `${[...rows, ...after].join('\n')}\n`);

    const result = await run([
      'analyse',
      file,
      '--change',
      'row:211',
      '--direction',
      'rise',
      '--json',
    ]);
    expect(result.err).toBe('');
    expect(result.code).toBe(EXIT.ok);
    const report = JSON.parse(result.out) as AnalyseReport;
    expect(report.evidence.nBefore).toBe(10);
    expect(report.evidence.nAfter).toBe(10);
    expect(report.evidence.observedShift).toBeCloseTo(1.3, 10);
    expect(report.evidence.reference).toMatchObject({ status: 'ok', m: 191, countAtLeast: 9 });
    expect(report.evidence.reference.status === 'ok' && report.evidence.reference.risk).toBeCloseTo(
      0.047,
      3,
    );
    expect(report.caution).toBe(CAUTION);

    const table = await run(['analyse', file, '--change', 'row:211', '--direction', 'rise']);
    expect(table.out).toContain('9 of 191 historical differences');
    expect(table.out).toContain(CAUTION);
  });

  it('names the line and reason of a bad file and exits 3', async () => {
    const file = join(dir, 'bad.csv');
    await writeFile(file, 'time,value\n1,10\n2,11\n3,eleven\n');
    const result = await run(['analyse', file, '--change', 'row:2']);
    expect(result.code).toBe(EXIT.badInput);
    expect(result.err).toContain('CSV_BAD_ROW');
    expect(result.err).toContain('Line 4: the value "eleven" is not a finite number.');
  });

  it('exits 2 on bad arguments and 3 on a missing file', async () => {
    expect((await run(['analyse', join(dir, 'x.csv')])).code).toBe(EXIT.usage);
    expect((await run(['analyse', 'x.csv', '--change', 'row:2', '--risk', '2'])).code).toBe(
      EXIT.usage,
    );
    expect((await run(['analyse', 'x.csv', '--nonsense'])).code).toBe(EXIT.usage);
    expect((await run(['frobnicate'])).code).toBe(EXIT.usage);
    const missing = await run(['analyse', join(dir, 'absent.csv'), '--change', 'row:2']);
    expect(missing.code).toBe(EXIT.badInput);
    expect(missing.err).toContain('FILE_NOT_FOUND');
  });

  it('prints help for every command', async () => {
    for (const argv of [['help'], ['analyse', '--help'], ['demo', '--help'], ['help', 'analyse']]) {
      const result = await run(argv);
      expect(result.code).toBe(EXIT.ok);
      expect(result.out).toMatch(/^Usage: trueshift/);
    }
  });
});

describe('trueshift demo', () => {
  it('finds the real shift credible and the other one not', async () => {
    const result = await run(['demo', '--out', dir, '--json']);
    expect(result.code).toBe(EXIT.ok);
    const [steam, solids] = JSON.parse(result.out) as AnalyseReport[];
    expect(steam?.evidence.verdict).toBe('credible-fall');
    expect(solids?.evidence.verdict).not.toMatch(/^credible/);
    const written = await readFile(join(dir, 'evaporator-steam-per-tonne.csv'), 'utf8');
    expect(written.split('\n')[0]).toBe('time,evap1_steam_kg_per_t');
  });
});
