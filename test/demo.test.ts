/**
 * `trueshift demo` as a person runs it, in a process of its own on free loopback ports: it starts
 * the service with the embedded broker, back-fills and feeds the simulated evaporator over MQTT, and
 * within its run the API shows the three promised outcomes. Run twice as fast as the demo's default
 * pace, so the whole test stays within about two minutes.
 */
import type { ChildProcess } from 'node:child_process';
import { mkdtemp, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { setTimeout as sleep } from 'node:timers/promises';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { CAUTION } from '@trueshift/config';
import type { AlertRecord, EvidenceSnapshot, MarkRecord } from '@trueshift/store';
import { requireBuiltCli, startCli } from './helpers/cli-process.js';

const STEAM = 'evap1_steam_kg_per_t';
const SOLIDS = 'evap1_solids_pct';
const CONDUCTIVITY = 'evap1_condensate_us_cm';
/** Live seconds the demo runs for; at speed 2 the solids mark fills its 30 values in 60 s. */
const DURATION_S = 100;

let dir: string;
let child: ChildProcess | null = null;
let stdout = '';
let stderr = '';
let exit: Promise<{ code: number | null; signal: NodeJS.Signals | null }>;

beforeAll(async () => {
  requireBuiltCli();
  dir = await mkdtemp(join(tmpdir(), 'trueshift-demo-'));
  const started = startCli(
    [
      'demo',
      '--port',
      '0',
      '--broker-port',
      '0',
      '--data',
      join(dir, 'demo-run'),
      '--duration',
      String(DURATION_S),
      '--speed',
      '2',
    ],
    { cwd: dir },
  );
  child = started;
  started.stdout?.setEncoding('utf8').on('data', (chunk: string) => (stdout += chunk));
  started.stderr?.setEncoding('utf8').on('data', (chunk: string) => (stderr += chunk));
  exit = new Promise((resolve) => {
    started.once('close', (code, signal) => {
      resolve({ code, signal });
    });
  });
});

afterAll(async () => {
  // Only if a failed test left it running; a passing run has already seen it exit.
  if (child !== null && child.exitCode === null && child.signalCode === null) {
    child.kill('SIGKILL');
    await exit;
  }
  await rm(dir, { recursive: true, force: true });
});

async function waitFor<T>(what: string, deadline: number, probe: () => Promise<T | null>) {
  for (;;) {
    const found = await probe();
    if (found !== null) return found;
    if (Date.now() > deadline) {
      throw new Error(`${what} did not appear in time.\nstdout:\n${stdout}\nstderr:\n${stderr}`);
    }
    await sleep(500);
  }
}

describe('trueshift demo', () => {
  it(
    'shows a credible fall, no credible shift and an unmarked-shift alert over the API',
    { timeout: 240_000 },
    async () => {
      const deadline = Date.now() + 200_000;
      const { page, token } = await waitFor('The page address and token', deadline, () => {
        const page = /^ {2}page: +(http:\/\/127\.0\.0\.1:\d+)\/ /m.exec(stdout)?.[1];
        const token = /^ {2}token: +(ts_[A-Za-z0-9_-]{43}) /m.exec(stdout)?.[1];
        return Promise.resolve(page === undefined || token === undefined ? null : { page, token });
      });
      const api = async <T>(path: string): Promise<T> => {
        const response = await fetch(`${page}/api/v1${path}`, {
          headers: { authorization: `Bearer ${token}` },
        });
        expect(response.status, path).toBe(200);
        return (await response.json()) as T;
      };

      // readWithoutToken is off: the page is public, the evidence needs the token.
      const shell = await fetch(`${page}/`);
      expect(shell.status).toBe(200);
      expect(await shell.text()).toContain('<title>trueshift</title>');
      expect((await fetch(`${page}/api/v1/alerts`)).status).toBe(401);

      const marks = await waitFor('Both marks', deadline, async () => {
        const { marks } = await api<{ marks: MarkRecord[] }>('/marks');
        const steam = marks.find((m) => m.tags.includes(STEAM));
        const solids = marks.find((m) => m.tags.includes(SOLIDS));
        return steam === undefined || solids === undefined ? null : { steam, solids };
      });
      expect(marks.steam.direction).toBe('fall');
      expect(marks.steam.at).toBe(marks.solids.at);

      const latest = async (mark: MarkRecord, tag: string): Promise<EvidenceSnapshot | null> => {
        const response = await fetch(`${page}/api/v1/marks/${mark.id}/evidence/${tag}`, {
          headers: { authorization: `Bearer ${token}` },
        });
        if (response.status === 404) return null;
        expect(response.status).toBe(200);
        return ((await response.json()) as { evidence: EvidenceSnapshot }).evidence;
      };

      const steam = await waitFor('A credible fall in steam per tonne', deadline, async () => {
        const evidence = await latest(marks.steam, STEAM);
        return evidence?.verdict === 'credible-fall' ? evidence : null;
      });
      expect(steam.risk).toBeLessThan(0.05);

      // The solids mark is judged until its after-window is full; the verdict then stands.
      const solids = await waitFor('The settled verdict on dry solids', deadline, async () => {
        const evidence = await latest(marks.solids, SOLIDS);
        return evidence !== null && evidence.nAfter >= (marks.solids.nAfterCap ?? 30)
          ? evidence
          : null;
      });
      expect(solids.verdict).toBe('no-credible-shift');

      const alerts = await waitFor('The alerts', deadline, async () => {
        const { alerts, caution } = await api<{ alerts: AlertRecord[]; caution: string }>(
          '/alerts?limit=100',
        );
        expect(caution).toBe(CAUTION);
        const credible = alerts.find((a) => a.kind === 'credible-shift' && a.tag === STEAM);
        const leak = alerts.find((a) => a.kind === 'unmarked-shift' && a.tag === CONDUCTIVITY);
        return credible === undefined || leak === undefined ? null : { alerts, credible, leak };
      });
      expect(alerts.credible.markId).toBe(marks.steam.id);
      expect(alerts.leak.title).toContain('unmarked rise');
      // A change that did nothing opens no alert.
      expect(alerts.alerts.filter((a) => a.tag === SOLIDS && a.kind === 'credible-shift')).toEqual(
        [],
      );

      // Ctrl-C ends the demo cleanly, with where things stand and the caution.
      child?.kill('SIGINT');
      const ended = await exit;
      expect(ended).toEqual({ code: 0, signal: null });
      expect(stdout).toContain('Where things stand:');
      expect(stdout).toMatch(new RegExp(`${STEAM}: CREDIBLE FALL`));
      expect(stdout).toMatch(new RegExp(`${SOLIDS}: NO CREDIBLE SHIFT`));
      expect(stdout.trimEnd().endsWith(CAUTION)).toBe(true);
      expect(stderr).toBe('');
    },
  );
});
