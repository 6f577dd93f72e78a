/**
 * The deployment files can't all be run here (no Docker engine on this machine), so each is checked
 * as far as this machine allows: the compose file and the example settings parse and validate, the
 * Mosquitto config runs in a real broker, the systemd unit passes systemd-analyze, and every path the
 * Dockerfile relies on exists.
 */
import { spawn, spawnSync } from 'node:child_process';
import { existsSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { connect, connectAsync } from 'mqtt';
import { describe, expect, it } from 'vitest';
import { parse } from 'yaml';
import { resolveConfig } from '@trueshift/config';
import { freePort, MOSQUITTO_BIN } from './helpers/mosquitto.js';

const root = fileURLToPath(new URL('..', import.meta.url));
const read = (path: string): string => readFileSync(join(root, path), 'utf8');

interface ComposeFile {
  services: Record<
    string,
    { image?: string; build?: string; environment?: Record<string, string>; volumes?: string[] }
  >;
  volumes: Record<string, unknown>;
}

describe('config/trueshift.example.yaml', () => {
  it('is valid and shows exactly the defaults', () => {
    const example = resolveConfig(parse(read('config/trueshift.example.yaml')));
    const defaults = resolveConfig(undefined);
    if (!example.ok) throw new Error(example.problems.join('\n'));
    expect(defaults.ok && defaults.config).toEqual(example.config);
  });
});

describe('config/trueshift.instance.example.yaml', () => {
  it('is a valid setting for one of several instances on PostgreSQL and a shared subscription', () => {
    const instance = resolveConfig(parse(read('config/trueshift.instance.example.yaml')));
    if (!instance.ok) throw new Error(instance.problems.join('\n'));
    expect(instance.config.store.kind).toBe('postgres');
    expect(instance.config.mqtt.sharedGroup).toBe('trueshift');
    expect(instance.config.cluster.instance).toBe('trueshift-1');
  });
});

describe('docker-compose.yml', () => {
  const compose = parse(read('docker-compose.yml')) as ComposeFile;

  it('runs trueshift beside a Mosquitto broker with persistence and a data volume', () => {
    expect(compose.services.mosquitto?.image).toMatch(/^eclipse-mosquitto:2/);
    expect(compose.services.mosquitto?.volumes).toContain(
      './deploy/mosquitto.conf:/mosquitto/config/mosquitto.conf:ro',
    );
    expect(compose.services.trueshift?.build).toBe('.');
    expect(compose.services.trueshift?.volumes).toContain('trueshift-data:/data');
    expect(Object.keys(compose.volumes)).toEqual(['mosquitto-data', 'trueshift-data']);
  });

  it('gives trueshift settings that validate and point at the broker and the volume', () => {
    const env = compose.services.trueshift?.environment ?? {};
    const result = resolveConfig(undefined, env);
    if (!result.ok) throw new Error(result.problems.join('\n'));
    expect(result.config.mqtt.url).toBe('mqtt://mosquitto:1883');
    expect(result.config.store.path).toBe('/data/trueshift.db');
    expect(result.config.drop.folder).toBe('/data/drop');
    expect(result.config.http.host).toBe('0.0.0.0');
  });
});

describe('Dockerfile', () => {
  const dockerfile = read('Dockerfile');

  it('starts the command line that exists, with settings that validate', () => {
    const cmd = /^CMD \[(.*)\]$/m.exec(dockerfile)?.[1] ?? '';
    const args = JSON.parse(`[${cmd}]`) as string[];
    expect(args.slice(0, 3)).toEqual(['node', 'services/cli/bin/trueshift.js', 'start']);
    expect(existsSync(join(root, args[1] ?? ''))).toBe(true);
    const env: Record<string, string> = {};
    for (const m of dockerfile.matchAll(/(TRUESHIFT_[A-Z_]+)=(\S+?)(?:\s*\\)?$/gm)) {
      if (m[1] !== undefined && m[2] !== undefined) env[m[1]] = m[2];
    }
    expect(Object.keys(env).length).toBeGreaterThanOrEqual(3);
    const result = resolveConfig(undefined, env);
    if (!result.ok) throw new Error(result.problems.join('\n'));
    expect(result.config.store.path).toBe('/data/trueshift.db');
  });

  it('keeps build output and data out of the image context', () => {
    const ignored = read('.dockerignore').split('\n');
    for (const entry of ['node_modules', '**/dist', 'data', '.git'])
      expect(ignored).toContain(entry);
  });
});

describe('deploy/mosquitto.conf', () => {
  it('runs a real broker that keeps QoS 1 messages for an absent session', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'trueshift-deploy-'));
    const port = await freePort();
    // The shipped file with only what must differ on a test machine: a free loopback port, a
    // temporary persistence folder, and the user (as root, mosquitto would drop to its own user).
    const config = read('deploy/mosquitto.conf')
      .replace(/^listener 1883$/m, `listener ${port} 127.0.0.1`)
      .replace(/^persistence_location .*$/m, `persistence_location ${dir}/`)
      .concat(process.getuid?.() === 0 ? '\nuser root\n' : '\n');
    expect(config).toContain('persistence true');
    writeFileSync(join(dir, 'mosquitto.conf'), config);
    const broker = spawn(MOSQUITTO_BIN, ['-c', join(dir, 'mosquitto.conf')], { stdio: 'ignore' });
    try {
      const url = `mqtt://127.0.0.1:${port}`;
      let subscriber = null;
      for (let attempt = 0; attempt < 50 && subscriber === null; attempt++) {
        try {
          subscriber = await connectAsync(url, {
            clientId: 'deploy-check',
            clean: false,
            reconnectPeriod: 0,
          });
        } catch {
          await new Promise((resolve) => setTimeout(resolve, 100));
        }
      }
      if (subscriber === null) throw new Error('the broker did not start with the shipped config');
      await subscriber.subscribeAsync('plant/#', { qos: 1 });
      await subscriber.endAsync();
      const publisher = await connectAsync(url, { reconnectPeriod: 0 });
      await publisher.publishAsync('plant/evap1/steam', '261.5', { qos: 1 });
      await publisher.endAsync();
      // Listen before the connection opens: the broker sends the queued message right after CONNACK.
      const back = connect(url, { clientId: 'deploy-check', clean: false, reconnectPeriod: 0 });
      const message = await new Promise<string>((resolve, reject) => {
        const timer = setTimeout(() => {
          reject(new Error('the queued message never arrived'));
        }, 5_000);
        back.on('message', (_topic, payload) => {
          clearTimeout(timer);
          resolve(payload.toString());
        });
      });
      expect(message).toBe('261.5');
      await back.endAsync();
    } finally {
      broker.kill('SIGTERM');
      rmSync(dir, { recursive: true, force: true });
    }
  });
});

describe('deploy/trueshift.service', () => {
  it('passes systemd-analyze verify', () => {
    const result = spawnSync(
      'systemd-analyze',
      ['verify', '--man=no', join(root, 'deploy/trueshift.service')],
      {
        encoding: 'utf8',
      },
    );
    expect(result.error).toBeUndefined();
    expect(result.stderr).not.toMatch(/Unknown (key|section)|Failed to parse|Invalid/i);
    expect(result.status).toBe(0);
  });
});
