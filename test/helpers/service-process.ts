/**
 * `trueshift start` as its own process on the built files, as an operator runs it: settings from
 * TRUESHIFT_* variables (and a settings file for what variables cannot say, such as webhooks), the
 * API on a fixed free port so a restart answers at the same address, and probes over HTTP.
 */
import type { ChildProcess } from 'node:child_process';
import { readFileSync } from 'node:fs';
import { writeFile } from 'node:fs/promises';
import { join } from 'node:path';
import { startCli } from './cli-process.js';
import { freePort } from './mosquitto.js';
import { waitFor } from './store-faults.js';

export interface ServiceProcess {
  base: string;
  storePath: string;
  /** The running child; a new one after restart(). */
  child(): ChildProcess;
  /** Everything the service wrote to stderr (warnings and errors), over all its runs. */
  stderr(): string;
  /** Starts the service (again) and waits until /ready answers 200. */
  start(readyTimeoutMs?: number): Promise<void>;
  kill(signal: NodeJS.Signals): Promise<void>;
  /** SIGTERM and the exit code. */
  stop(): Promise<number | null>;
  /** A line of GET /metrics, NaN while the service does not answer. */
  metric(name: string): Promise<number>;
  /** VmRSS of the process from /proc, in bytes. */
  rssBytes(): number;
}

export function exited(child: ChildProcess): Promise<void> {
  if (child.exitCode !== null || child.signalCode !== null) return Promise.resolve();
  return new Promise((resolve) => {
    child.once('exit', () => {
      resolve();
    });
  });
}

export async function serviceProcess(options: {
  dir: string;
  brokerUrl: string;
  clientId: string;
  /** Written to a settings file; TRUESHIFT_* variables override it. */
  settings?: Record<string, unknown>;
  env?: Record<string, string>;
}): Promise<ServiceProcess> {
  const port = await freePort();
  const base = `http://127.0.0.1:${String(port)}`;
  const storePath = join(options.dir, 'store.db');
  const configFile = join(options.dir, 'trueshift.yaml');
  // Probes and metrics without a token: these tests watch the service, they do not test access.
  await writeFile(
    configFile,
    JSON.stringify({
      ...options.settings,
      http: { readWithoutToken: true, ...(options.settings?.http as object | undefined) },
    }),
  );
  const env = {
    TRUESHIFT_CONFIG: configFile,
    TRUESHIFT_MQTT__URL: options.brokerUrl,
    TRUESHIFT_MQTT__CLIENTID: options.clientId,
    TRUESHIFT_MQTT__RECONNECTMINMS: '100',
    TRUESHIFT_MQTT__RECONNECTMAXMS: '500',
    TRUESHIFT_HTTP__PORT: String(port),
    TRUESHIFT_STORE__PATH: storePath,
    TRUESHIFT_DROP__FOLDER: join(options.dir, 'drop'),
    TRUESHIFT_LOG__LEVEL: 'warn',
    ...options.env,
  };
  let stderr = '';
  let child: ChildProcess | null = null;
  const current = (): ChildProcess => {
    if (child === null) throw new Error('the service was never started');
    return child;
  };
  const metric = async (name: string): Promise<number> => {
    try {
      const text = await (await fetch(`${base}/metrics`)).text();
      const line = text.split('\n').find((l) => l.startsWith(`${name} `));
      return Number(line?.split(' ')[1] ?? Number.NaN);
    } catch {
      return Number.NaN;
    }
  };
  return {
    base,
    storePath,
    child: current,
    stderr: () => stderr,
    async start(readyTimeoutMs = 30_000) {
      const started = startCli(['start'], { cwd: options.dir, env });
      child = started;
      started.stderr?.setEncoding('utf8');
      started.stderr?.on('data', (chunk: string) => (stderr += chunk));
      started.stdout?.resume();
      await waitFor(
        async () => {
          if (started.exitCode !== null) throw new Error(`the service exited: ${stderr}`);
          try {
            return (await fetch(`${base}/ready`)).status === 200;
          } catch {
            return false;
          }
        },
        'the service to be ready',
        readyTimeoutMs,
      );
    },
    async kill(signal) {
      const running = current();
      if (running.exitCode === null && running.signalCode === null) running.kill(signal);
      await exited(running);
    },
    async stop() {
      const running = current();
      if (running.exitCode === null && running.signalCode === null) running.kill('SIGTERM');
      await exited(running);
      return running.exitCode;
    },
    metric,
    rssBytes() {
      const status = readFileSync(`/proc/${String(current().pid)}/status`, 'utf8');
      const kb = /VmRSS:\s+(\d+) kB/.exec(status)?.[1];
      return Number(kb) * 1024;
    },
  };
}
