/**
 * The `trueshift` command line as scripts meet it: a separate node process on the built files, with
 * its stdout, stderr and exit code.
 */
import { spawn } from 'node:child_process';
import type { ChildProcess } from 'node:child_process';
import { readdirSync, statSync } from 'node:fs';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';

export const CLI_BIN = fileURLToPath(
  new URL('../../services/cli/bin/trueshift.js', import.meta.url),
);
const CLI_SRC = fileURLToPath(new URL('../../services/cli/src/', import.meta.url));
const CLI_BUILD_INFO = fileURLToPath(
  new URL('../../services/cli/dist/.tsbuildinfo', import.meta.url),
);

function newestSource(dir: string): number {
  let newest = 0;
  for (const entry of readdirSync(dir, { withFileTypes: true })) {
    const path = join(dir, entry.name);
    if (entry.isDirectory()) newest = Math.max(newest, newestSource(path));
    else if (entry.name.endsWith('.ts') && !entry.name.endsWith('.test.ts')) {
      newest = Math.max(newest, statSync(path).mtimeMs);
    }
  }
  return newest;
}

/**
 * These tests run the built command line. `npm test` builds before vitest; run by hand, a stale
 * build would test yesterday's code, so it is refused with what to do instead.
 */
export function requireBuiltCli(): void {
  let built: number;
  try {
    built = statSync(CLI_BUILD_INFO).mtimeMs;
  } catch {
    throw new Error('services/cli is not built: run "npx tsc -b" (npm test does) first.');
  }
  if (newestSource(CLI_SRC) > built) {
    throw new Error('services/cli/dist is older than its sources: run "npx tsc -b" first.');
  }
}

/** The environment without TRUESHIFT_* settings, so the developer's own never leak in. */
export function cleanEnv(extra: Record<string, string> = {}): NodeJS.ProcessEnv {
  const env: NodeJS.ProcessEnv = {};
  for (const [name, value] of Object.entries(process.env)) {
    if (!name.startsWith('TRUESHIFT_')) env[name] = value;
  }
  return { ...env, ...extra };
}

export interface CliRun {
  code: number | null;
  signal: NodeJS.Signals | null;
  stdout: string;
  stderr: string;
}

export function startCli(
  args: readonly string[],
  options: { cwd: string; env?: Record<string, string> },
): ChildProcess {
  return spawn(process.execPath, [CLI_BIN, ...args], {
    cwd: options.cwd,
    env: cleanEnv(options.env),
    stdio: ['ignore', 'pipe', 'pipe'],
  });
}

/** Runs one command to its end; killed (and the test failed by the caller) past the timeout. */
export function runCliProcess(
  args: readonly string[],
  options: { cwd: string; env?: Record<string, string>; timeoutMs?: number },
): Promise<CliRun> {
  const child = startCli(args, options);
  let stdout = '';
  let stderr = '';
  child.stdout?.setEncoding('utf8').on('data', (chunk: string) => (stdout += chunk));
  child.stderr?.setEncoding('utf8').on('data', (chunk: string) => (stderr += chunk));
  const timer = setTimeout(() => child.kill('SIGKILL'), options.timeoutMs ?? 30_000);
  return new Promise((resolve, reject) => {
    child.once('error', (error) => {
      clearTimeout(timer);
      reject(error);
    });
    child.once('close', (code, signal) => {
      clearTimeout(timer);
      resolve({ code, signal, stdout, stderr });
    });
  });
}

/**
 * Runs `work` over the items, at most `limit` at a time: a few CLI processes at once keep the test
 * quick without starving a shared two-core CI machine.
 */
export async function mapLimited<T, R>(
  items: readonly T[],
  limit: number,
  work: (item: T) => Promise<R>,
): Promise<R[]> {
  const results: R[] = new Array<R>(items.length);
  let next = 0;
  const lanes = Array.from({ length: Math.min(limit, items.length) }, async () => {
    while (next < items.length) {
      const index = next++;
      results[index] = await work(items[index] as T);
    }
  });
  await Promise.all(lanes);
  return results;
}
