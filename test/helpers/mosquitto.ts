/**
 * A real mosquitto broker for tests and benchmarks: spawned on a free loopback port with its own
 * config and persistence folder, so a restart keeps persistent sessions and their queued messages.
 * The machine's own mosquitto on 1883 is never touched.
 */
import { type ChildProcess, spawn } from 'node:child_process';
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { createConnection, createServer } from 'node:net';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { setTimeout as sleep } from 'node:timers/promises';

export const MOSQUITTO_BIN = process.env.MOSQUITTO_BIN ?? '/usr/sbin/mosquitto';

export interface MosquittoOptions {
  /** A fixed port, e.g. to restart on the same one; a free port is chosen when left out. */
  port?: number;
  /** A persistence folder to reuse (a restart); a new temporary one when left out. */
  dir?: string;
  /** More mosquitto.conf lines, e.g. "max_inflight_messages 100". */
  extraConfig?: readonly string[];
  /** How long to wait for the broker to accept connections. */
  startTimeoutMs?: number;
}

export interface Mosquitto {
  url: string;
  port: number;
  /** Holds the config file and the persistence database. */
  dir: string;
  /** SIGTERM (mosquitto saves its persistence file on the way out), then waits for the exit. */
  stop(): Promise<void>;
  /** stop(), then removes the folder. */
  dispose(): Promise<void>;
  /** What the broker wrote to stderr, for failure messages. */
  output(): string;
}

/** A port that was free a moment ago on 127.0.0.1. */
export async function freePort(): Promise<number> {
  return new Promise((resolve, reject) => {
    const server = createServer();
    server.once('error', reject);
    server.listen(0, '127.0.0.1', () => {
      const address = server.address();
      const port = typeof address === 'object' && address !== null ? address.port : 0;
      server.close(() => {
        resolve(port);
      });
    });
  });
}

function canConnect(port: number): Promise<boolean> {
  return new Promise((resolve) => {
    const socket = createConnection({ host: '127.0.0.1', port });
    socket.once('connect', () => {
      socket.destroy();
      resolve(true);
    });
    socket.once('error', () => {
      socket.destroy();
      resolve(false);
    });
  });
}

function exited(child: ChildProcess): Promise<void> {
  if (child.exitCode !== null || child.signalCode !== null) return Promise.resolve();
  return new Promise((resolve) => {
    child.once('exit', () => {
      resolve();
    });
  });
}

export async function startMosquitto(options: MosquittoOptions = {}): Promise<Mosquitto> {
  const dir = options.dir ?? mkdtempSync(join(tmpdir(), 'trueshift-mosquitto-'));
  const startTimeoutMs = options.startTimeoutMs ?? 10_000;
  // A port picked by freePort() can be taken by someone else before mosquitto binds it: try again.
  for (let attempt = 0; ; attempt++) {
    const port = options.port ?? (await freePort());
    const config = join(dir, 'mosquitto.conf');
    writeFileSync(
      config,
      [
        `listener ${port} 127.0.0.1`,
        'allow_anonymous true',
        'persistence true',
        `persistence_location ${dir}/`,
        'persistence_file mosquitto.db',
        // Started as root, mosquitto would switch to its own user and then be refused the temporary
        // folder, so it could not save the sessions that a restart must keep.
        ...(process.getuid?.() === 0 ? ['user root'] : []),
        // Tests publish bursts faster than a slow subscriber acknowledges; the default queue of
        // 1000 would make the broker drop the rest, which is not what those tests are about.
        'max_queued_messages 0',
        'log_dest stderr',
        'log_type error',
        'log_type warning',
        ...(options.extraConfig ?? []),
        '',
      ].join('\n'),
    );
    const child = spawn(MOSQUITTO_BIN, ['-c', config], { stdio: ['ignore', 'ignore', 'pipe'] });
    let output = '';
    child.stderr.setEncoding('utf8');
    child.stderr.on('data', (chunk: string) => {
      output += chunk;
    });
    const spawnError = new Promise<Error>((resolve) => child.once('error', resolve));
    const deadline = Date.now() + startTimeoutMs;
    let ready = false;
    while (Date.now() < deadline) {
      if (child.exitCode !== null || child.signalCode !== null) break;
      if (await canConnect(port)) {
        ready = true;
        break;
      }
      const failed = await Promise.race([spawnError, sleep(50).then(() => null)]);
      if (failed !== null) throw new Error(`cannot start ${MOSQUITTO_BIN}: ${failed.message}`);
    }
    if (!ready) {
      child.kill('SIGKILL');
      await exited(child);
      if (options.port === undefined && attempt < 3) continue;
      throw new Error(`mosquitto did not start on 127.0.0.1:${port}: ${output.trim()}`);
    }
    const stop = async (): Promise<void> => {
      if (child.exitCode !== null || child.signalCode !== null) return;
      child.kill('SIGTERM');
      const killer = setTimeout(() => child.kill('SIGKILL'), 5_000);
      await exited(child);
      clearTimeout(killer);
    };
    return {
      url: `mqtt://127.0.0.1:${port}`,
      port,
      dir,
      stop,
      async dispose() {
        await stop();
        if (options.dir === undefined) rmSync(dir, { recursive: true, force: true });
      },
      output: () => output,
    };
  }
}
