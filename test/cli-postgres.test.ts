/**
 * The command line on a PostgreSQL store that instances share: `import`, `mark` and `evidence`
 * work on the database the configuration names (not on a SQLite file beside it), and a mark made
 * from the command line reaches the instances as a change from elsewhere.
 */
import { existsSync } from 'node:fs';
import { mkdtemp, rm, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { pino } from 'pino';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { buildAnalyser } from '@trueshift/analyser-service';
import { seededRandom } from '@trueshift/stats';
import type { ClusterMessage } from '@trueshift/store';
import { openPostgresStore } from '@trueshift/store-postgres';
import { requireBuiltCli, runCliProcess } from './helpers/cli-process.js';
import type { CliRun } from './helpers/cli-process.js';
import { createTestDatabase } from './helpers/postgres.js';
import type { TestDatabase } from './helpers/postgres.js';
import { waitFor } from './helpers/store-faults.js';

const HOUR = 3_600_000;
const T0 = Date.UTC(2026, 3, 1);
const TAG = 'granulator_moisture_pct';
const HISTORY = 200;
const AFTER = 30;
const CHANGE_AT = T0 + HISTORY * HOUR;

let db: TestDatabase;
let dir: string;
let config: string;

function cli(args: readonly string[]): Promise<CliRun> {
  return runCliProcess([...args, '--config', config], { cwd: dir, timeoutMs: 60_000 });
}

beforeAll(async () => {
  requireBuiltCli();
  db = await createTestDatabase('cli');
  dir = await mkdtemp(join(tmpdir(), 'trueshift-cli-postgres-'));
  config = join(dir, 'trueshift.yaml');
  await writeFile(
    config,
    JSON.stringify({
      store: { kind: 'postgres', url: db.url, shards: 4, path: join(dir, 'unused.db') },
    }),
  );
});

afterAll(async () => {
  await rm(dir, { recursive: true, force: true });
  await db.drop();
});

describe('the command line on PostgreSQL', () => {
  it('imports, marks and reads evidence in the shared database', async () => {
    const random = seededRandom(5);
    const rows = [`time,${TAG}`];
    for (let i = 0; i < HISTORY + AFTER; i++) {
      const value = 6.2 + 0.1 * random.normal() - (i >= HISTORY ? 0.4 : 0);
      rows.push(`${new Date(T0 + i * HOUR).toISOString()},${value.toFixed(3)}`);
    }
    const file = join(dir, 'granulator.csv');
    await writeFile(file, `${rows.join('\n')}\n`);

    const imported = await cli(['import', file]);
    expect(imported.stderr).toBe('');
    expect(imported.code).toBe(0);
    expect(imported.stdout).toMatch(/Stored\s+230 samples/);
    expect(existsSync(join(dir, 'unused.db'))).toBe(false);

    const store = await openPostgresStore({ url: db.url, shards: 4, instance: 'node-a' });
    try {
      expect(await store.countSamples(TAG)).toBe(HISTORY + AFTER);
      const heard: ClusterMessage[] = [];
      const unlisten = await store.listen((message) => heard.push(message));

      const marked = await cli([
        'mark',
        '--tag',
        TAG,
        '--label',
        'new binder supplier',
        '--at',
        new Date(CHANGE_AT).toISOString(),
        '--direction',
        'fall',
      ]);
      expect(marked.code).toBe(0);
      const markId = marked.stdout.trim();
      // The instance hears of the mark as a change made elsewhere (the command's own name).
      await waitFor(
        () => heard.some((m) => m.kind === 'mark' && m.markId === markId),
        'the mark announced to the instances',
      );
      const announced = heard.find((m) => m.kind === 'mark');
      expect(announced?.kind === 'mark' ? announced.origin : '').toMatch(/^cli-/);
      await unlisten();

      const analyser = buildAnalyser({
        store,
        log: pino({ level: 'silent' }),
        clock: () => CHANGE_AT + AFTER * HOUR,
        options: { pollMs: 0 },
      });
      await analyser.drain();
      await analyser.close();
    } finally {
      await store.close();
    }

    const evidence = await cli(['evidence', TAG, '--json']);
    expect(evidence.code).toBe(0);
    // The evidence the analyser above stored in the database, read back by a separate process.
    expect(JSON.stringify(JSON.parse(evidence.stdout))).toContain('credible-fall');
  }, 120_000);
});
