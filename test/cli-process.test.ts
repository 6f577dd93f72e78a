/**
 * The `trueshift` command line as a script sees it: separate processes on the built files, their
 * output and their exit codes, against a real SQLite store file. The analyser that turns a mark into
 * evidence runs in this process on the same file, as the service would beside the command line.
 */
import { mkdtemp, readFile, rm, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { pino } from 'pino';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildAnalyser } from '@trueshift/analyser-service';
import { CAUTION } from '@trueshift/config';
import { seededRandom } from '@trueshift/stats';
import type { AlertRecord, MarkRecord } from '@trueshift/store';
import { openSqliteStore } from '@trueshift/store-sqlite';
import { mapLimited, requireBuiltCli, runCliProcess } from './helpers/cli-process.js';
import type { CliRun } from './helpers/cli-process.js';

const HOUR = 3_600_000;
const T0 = Date.UTC(2026, 0, 1);
const TAG = 'reactor_yield_pct';
const HISTORY = 300;
const AFTER = 30;
const CHANGE_AT = T0 + HISTORY * HOUR;

let dir: string;
let config: string;
let storePath: string;

function cli(args: readonly string[], timeoutMs = 30_000): Promise<CliRun> {
  return runCliProcess(args, { cwd: dir, timeoutMs });
}

/** A yield history with a real fall of 3 points (three noise SDs) from CHANGE_AT on. */
function historyCsv(): string {
  const random = seededRandom(11);
  const rows = [`time,${TAG}`];
  for (let i = 0; i < HISTORY + AFTER; i++) {
    const value = 80 + random.normal() - (i >= HISTORY ? 3 : 0);
    rows.push(`${new Date(T0 + i * HOUR).toISOString()},${value.toFixed(3)}`);
  }
  return `${rows.join('\n')}\n`;
}

beforeAll(async () => {
  requireBuiltCli();
  dir = await mkdtemp(join(tmpdir(), 'trueshift-cli-process-'));
  storePath = join(dir, 'store', 'trueshift.db');
  config = join(dir, 'trueshift.yaml');
  await writeFile(config, `store:\n  path: ${JSON.stringify(storePath)}\n`);
});

afterAll(async () => {
  await rm(dir, { recursive: true, force: true });
});

const COMMANDS = [
  'start',
  'check',
  'token',
  'demo',
  'import',
  'mark',
  'withdraw',
  'evidence',
  'alerts',
  'ack',
  'report',
  'analyse',
];

/** Each CLI process takes about a second to start; a test runs several. */
const SLOW = { timeout: 120_000 };

describe('help', SLOW, () => {
  it('prints the overview and each command its own usage, exit 0', async () => {
    const overview = await cli(['help']);
    expect(overview.code).toBe(0);
    expect(overview.stderr).toBe('');
    for (const command of COMMANDS) expect(overview.stdout).toContain(`  ${command}`);
    expect(overview.stdout).toContain('4 not found');

    const runs = await mapLimited(COMMANDS, 4, (command) => cli(['help', command]));
    runs.forEach((run, i) => {
      expect(run.code, COMMANDS[i]).toBe(0);
      expect(run.stdout, COMMANDS[i]).toMatch(new RegExp(`^Usage: trueshift ${COMMANDS[i]}`));
    });
    const flag = await cli(['mark', '--help']);
    expect(flag.code).toBe(0);
    expect(flag.stdout).toBe(runs[COMMANDS.indexOf('mark')]?.stdout);
    // The store-side commands say they work on the store file beside a running service.
    expect(flag.stdout).toContain('WAL');
    expect(flag.stdout).toContain('picks new marks up');
  });

  it('exits 2 on an unknown command or help topic', async () => {
    const unknown = await cli(['frobnicate']);
    expect(unknown.code).toBe(2);
    expect(unknown.stderr).toContain('unknown command "frobnicate"');
    expect((await cli(['help', 'frobnicate'])).code).toBe(2);
  });
});

describe('bad arguments', SLOW, () => {
  it('exits 2 with the reason, before touching any store', async () => {
    const cases: [string[], string][] = [
      [['mark', '--label', 'x', '--config', config], '--tag is required'],
      [['mark', '--tag', TAG, '--config', config], '--label is required'],
      [['mark', '--tag', TAG, '--label', 'x', '--direction', 'up'], '--direction must be'],
      [['mark', '--tag', TAG, '--label', 'x', '--at', 'yesterday'], '--at must be'],
      [['mark', '--tag', TAG, '--label', 'x', '--settling', 'a while'], '--settling must be'],
      [['mark', '--tag', TAG, '--label', 'x', '--risk', '5'], '--risk must be'],
      [['import'], 'Name the CSV file'],
      [['withdraw', 'some-id'], '--reason is required'],
      [['evidence'], 'Name the tag'],
      [['alerts', '--state', 'maybe'], '--state must be'],
      [['ack', 'seven', '--note', 'x'], 'whole number'],
      [['ack', '7'], '--note is required'],
      [['report', 'only-a-mark'], 'Name the mark and the tag'],
      [['demo', '--speed', '0'], '--speed must be'],
      [['demo', '--offline', '--port', '1'], 'belong to the live demo'],
      [['token', 'create'], '--name is required'],
      [['alerts', '--nonsense'], "Unknown option '--nonsense'"],
    ];
    const runs = await mapLimited(cases, 4, ([args]) => cli(args));
    runs.forEach((run, i) => {
      const [args, reason] = cases[i] ?? [[], ''];
      expect(run.code, args.join(' ')).toBe(2);
      expect(run.stderr, args.join(' ')).toContain('INVALID_ARGUMENT');
      expect(run.stderr, args.join(' ')).toContain(reason);
    });
  });
});

describe('check', SLOW, () => {
  it('says a good configuration is valid (exit 0) and lists every problem of a bad one (exit 3)', async () => {
    const good = await cli(['check', '--config', config]);
    expect(good.code).toBe(0);
    expect(good.stdout).toContain('The configuration is valid');

    const bad = join(dir, 'bad.yaml');
    await writeFile(
      bad,
      ['http:', '  port: 99999', 'analysis:', '  riskLevel: 2', 'colour: blue', ''].join('\n'),
    );
    const result = await cli(['check', '--config', bad]);
    expect(result.code).toBe(3);
    expect(result.stderr).toContain('has 3 problems');
    expect(result.stderr).toContain('http.port');
    expect(result.stderr).toContain('analysis.riskLevel');
    expect(result.stderr).toMatch(/colour|Unexpected property/);

    const json = await cli(['check', '--config', bad, '--json']);
    expect(json.code).toBe(3);
    expect(JSON.parse(json.stdout)).toMatchObject({ valid: false });

    const missing = await cli(['check', '--config', join(dir, 'absent.yaml')]);
    expect(missing.code).toBe(3);
    expect(missing.stderr).toContain('Cannot read');
  });
});

describe('the store, from the command line', SLOW, () => {
  let markId = '';
  let alert: AlertRecord | undefined;

  it('creates a token, shown once (exit 0)', async () => {
    const run = await cli([
      'token',
      'create',
      '--name',
      'ci',
      '--scopes',
      'read,write',
      '--config',
      config,
    ]);
    expect(run.code).toBe(0);
    expect(run.stdout).toContain('"ci" (read, write)');
    expect(run.stdout).toMatch(/^ts_[A-Za-z0-9_-]{43}$/m);
  });

  it('refuses a bad file with its line and reason (exit 3), and takes a good one (exit 0)', async () => {
    const missing = await cli(['import', join(dir, 'absent.csv'), '--config', config]);
    expect(missing.code).toBe(3);
    expect(missing.stderr).toContain('FILE_NOT_FOUND');

    const noHeader = join(dir, 'no-header.csv');
    await writeFile(noHeader, 'just one column\n1\n2\n');
    const refused = await cli(['import', noHeader, '--config', config]);
    expect(refused.code).toBe(3);
    expect(refused.stderr).toMatch(/CSV_BAD_HEADER: .*no-header\.csv is refused: line 1: /);

    const badRows = join(dir, 'bad-rows.csv');
    await writeFile(
      badRows,
      [
        'time,other_tag',
        '2026-01-01T00:00:00Z,1.5',
        '2026-01-01T01:00:00Z,eleven',
        '2026-01-01T02:00:00Z,2.5',
        '',
      ].join('\n'),
    );
    const partly = await cli(['import', badRows, '--config', config]);
    expect(partly.code).toBe(3);
    expect(partly.stdout).toMatch(/Stored\s+2 samples/);
    expect(partly.stdout).toMatch(/Quarantined\s+1 rejections on 1 of 3 lines/);
    expect(partly.stdout).toContain('line 3: ');
    expect(partly.stdout).toContain('eleven');
    expect(partly.stderr).toContain(
      '1 of 3 lines were rejected and quarantined; the first, line 3',
    );

    const good = join(dir, 'history.csv');
    await writeFile(good, historyCsv());
    const taken = await cli(['import', good, '--config', config]);
    expect(taken.stderr).toBe('');
    expect(taken.code).toBe(0);
    expect(taken.stdout).toMatch(/Imported .*history\.csv \(wide layout\): 330 rows/);
    expect(taken.stdout).toMatch(/Stored\s+330 samples/);
    const again = await cli(['import', good, '--config', config]);
    expect(again.code).toBe(0);
    expect(again.stdout).toContain('was imported before');
  });

  it('marks a change (exit 0, the id on stdout) and refuses an unknown tag (exit 4)', async () => {
    const unknown = await cli(['mark', '--tag', 'no_such_tag', '--label', 'x', '--config', config]);
    expect(unknown.code).toBe(4);
    expect(unknown.stderr).toContain('TAG_NOT_FOUND');

    const run = await cli([
      'mark',
      '--tag',
      TAG,
      '--label',
      'New catalyst batch',
      '--at',
      new Date(CHANGE_AT).toISOString(),
      '--direction',
      'fall',
      '--before',
      '30',
      '--note',
      'Supplier B',
      '--by',
      'ci-engineer',
      '--config',
      config,
    ]);
    expect(run.stderr).toContain('Marked "New catalyst batch"');
    expect(run.code).toBe(0);
    markId = run.stdout.trim();
    expect(markId).toMatch(/^[0-9a-f-]{36}$/);

    // The service's analyser, on the same store file, picks the mark up and judges it.
    const store = openSqliteStore({ path: storePath });
    try {
      const analyser = buildAnalyser({
        store,
        log: pino({ level: 'silent' }),
        clock: () => CHANGE_AT + AFTER * HOUR,
        options: { pollMs: 0 },
      });
      await analyser.drain();
      await analyser.close();
      const marks: MarkRecord[] = await store.listMarks({ tag: TAG });
      expect(marks.map((m) => [m.id, m.nBefore, m.direction])).toEqual([[markId, 30, 'fall']]);
      expect((await store.markHistory(markId))[0]?.changedBy).toBe('ci-engineer');
    } finally {
      await store.close();
    }
  });

  it('prints the latest evidence as a table with the caution, or as JSON (exit 0)', async () => {
    const run = await cli(['evidence', TAG, '--config', config]);
    expect(run.stderr).toBe('');
    expect(run.code).toBe(0);
    expect(run.stdout).toContain(`trueshift evidence for "${TAG}"`);
    expect(run.stdout).toContain(`Mark ${markId}: "New catalyst batch"`);
    expect(run.stdout).toMatch(/Reference risk\s+below/);
    expect(run.stdout).toMatch(/Verdict\s+CREDIBLE FALL/);
    expect(run.stdout).toContain('settled: an alert opened');
    expect(run.stdout.trimEnd().endsWith(CAUTION)).toBe(true);

    const json = await cli(['evidence', TAG, '--mark', markId, '--json', '--config', config]);
    expect(json.code).toBe(0);
    const parsed = JSON.parse(json.stdout) as {
      caution: string;
      marks: { mark: { id: string }; evidence: { verdict: string; nAfter: number } }[];
    };
    expect(parsed.caution).toBe(CAUTION);
    expect(parsed.marks[0]?.mark.id).toBe(markId);
    expect(parsed.marks[0]?.evidence.verdict).toBe('credible-fall');

    expect((await cli(['evidence', 'no_such_tag', '--config', config])).code).toBe(4);
    expect((await cli(['evidence', TAG, '--mark', 'no-such-mark', '--config', config])).code).toBe(
      4,
    );
    expect((await cli(['evidence', 'other_tag', '--config', config])).code).toBe(4);
  });

  it('lists alerts and acknowledges one (exit 0); an unknown alert is exit 4', async () => {
    const json = await cli(['alerts', '--state', 'open', '--json', '--config', config]);
    expect(json.code).toBe(0);
    const { caution, alerts } = JSON.parse(json.stdout) as {
      caution: string;
      alerts: AlertRecord[];
    };
    expect(caution).toBe(CAUTION);
    alert = alerts.find((a) => a.kind === 'credible-shift' && a.markId === markId);
    expect(alert?.title).toContain('credible fall');
    const id = String(alert?.id);

    const table = await cli(['alerts', '--config', config]);
    expect(table.code).toBe(0);
    expect(table.stdout).toMatch(new RegExp(`^${id}\\s+open\\s+credible-shift\\s+${TAG}`, 'm'));
    expect(table.stdout.trimEnd().endsWith(CAUTION)).toBe(true);

    const ack = await cli([
      'ack',
      id,
      '--note',
      'Checking the catalyst lot',
      '--by',
      'ci-engineer',
      '--config',
      config,
    ]);
    expect(ack.code).toBe(0);
    expect(ack.stdout).toContain(`Acknowledged alert ${id}`);

    const acknowledged = await cli(['alerts', '--state', 'acknowledged', '--config', config]);
    expect(acknowledged.stdout).toMatch(new RegExp(`^${id}\\s+acknowledged`, 'm'));
    expect(acknowledged.stdout).toContain('acknowledged by ci-engineer: Checking the catalyst lot');
    expect((await cli(['alerts', '--state', 'cleared', '--config', config])).stdout).toContain(
      'No cleared alerts.',
    );

    const missing = await cli(['ack', '999999', '--note', 'x', '--config', config]);
    expect(missing.code).toBe(4);
    expect(missing.stderr).toContain('ALERT_NOT_FOUND');
  });

  it('exports the decision report as one self-contained HTML file with the caution (exit 0)', async () => {
    const out = join(dir, 'reports', 'catalyst.html');
    const run = await cli(['report', markId, TAG, '--out', out, '--config', config], 60_000);
    expect(run.stderr).toBe('');
    expect(run.code).toBe(0);
    expect(run.stdout).toContain(`to ${out}`);
    expect(run.stdout).toContain(CAUTION);
    const html = await readFile(out, 'utf8');
    expect(html.toLowerCase().startsWith('<!doctype html>')).toBe(true);
    expect(html).toContain(CAUTION);
    expect(html).toContain('New catalyst batch');
    expect(html).toContain('<svg');
    // Self-contained: no script, and nothing fetched from elsewhere.
    expect(html).not.toMatch(/<script/i);
    expect(html).not.toMatch(/(src|href)="https?:/i);

    const stdout = await cli(['report', markId, TAG, '--config', config], 60_000);
    expect(stdout.code).toBe(0);
    expect(stdout.stdout.toLowerCase().startsWith('<!doctype html>')).toBe(true);
    expect((await cli(['report', 'no-such-mark', TAG, '--config', config], 60_000)).code).toBe(4);
  });

  it('withdraws the mark (exit 0), then says there is nothing to withdraw or show', async () => {
    const run = await cli([
      'withdraw',
      markId,
      '--reason',
      'Wrong batch recorded',
      '--config',
      config,
    ]);
    expect(run.code).toBe(0);
    expect(run.stdout).toContain(`Withdrew mark ${markId}`);
    const again = await cli(['withdraw', markId, '--reason', 'again', '--config', config]);
    expect(again.code).toBe(3);
    expect(again.stderr).toContain('MARK_WITHDRAWN');
    expect(
      (await cli(['withdraw', 'no-such-mark', '--reason', 'x', '--config', config])).code,
    ).toBe(4);
    const evidence = await cli(['evidence', TAG, '--config', config]);
    expect(evidence.code).toBe(4);
    expect(evidence.stderr).toContain('No active mark');
  });

  it('refuses to work on a store that is not there (exit 3) rather than making an empty one', async () => {
    const elsewhere = join(dir, 'elsewhere.yaml');
    await writeFile(elsewhere, `store:\n  path: ${JSON.stringify(join(dir, 'none', 'x.db'))}\n`);
    const run = await cli(['alerts', '--config', elsewhere]);
    expect(run.code).toBe(3);
    expect(run.stderr).toContain('There is no store at');
  });
});
