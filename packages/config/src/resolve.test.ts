import { describe, expect, it } from 'vitest';
import { resolveConfig } from './resolve.js';

describe('resolveConfig', () => {
  it('fills every default so a fresh machine runs with no file', () => {
    const result = resolveConfig(undefined, {});
    if (!result.ok) throw new Error(result.problems.join('\n'));
    const { config } = result;
    expect(config.mqtt.url).toBeNull();
    expect(config.mqtt.embedded).toEqual({ host: '127.0.0.1', port: 18830 });
    expect(config.http.host).toBe('127.0.0.1');
    expect(config.http.readWithoutToken).toBe(false);
    expect(config.store.path).toBe('data/trueshift.db');
    expect(config.analysis.riskLevel).toBe(0.05);
    expect(config.mqtt.subscriptions).toHaveLength(1);
  });

  it('lets the environment override the file, by path and without regard to case', () => {
    const result = resolveConfig(
      { http: { port: 9000 }, mqtt: { clientId: 'from-file' } },
      {
        TRUESHIFT_HTTP__PORT: '9100',
        TRUESHIFT_MQTT__CLIENTID: 'site-7',
        TRUESHIFT_MQTT__URL: 'mqtt://127.0.0.1:1883',
        TRUESHIFT_HTTP__READWITHOUTTOKEN: 'true',
        UNRELATED: 'x',
      },
    );
    if (!result.ok) throw new Error(result.problems.join('\n'));
    expect(result.config.http.port).toBe(9100);
    expect(result.config.http.readWithoutToken).toBe(true);
    expect(result.config.mqtt.clientId).toBe('site-7');
    expect(result.config.mqtt.url).toBe('mqtt://127.0.0.1:1883');
  });

  it('lists every problem by its path, all at once', () => {
    const result = resolveConfig(
      {
        http: { port: 70000, colour: 'blue' },
        analysis: { riskLevel: 2 },
        mqtt: {
          reconnectMinMs: 5000,
          reconnectMaxMs: 100,
          subscriptions: [{ filter: 'a/#/b', tag: '{3}', format: 'json' }],
        },
      },
      { TRUESHIFT_NOPE__X: '1' },
    );
    expect(result.ok).toBe(false);
    if (result.ok) return;
    const text = result.problems.join('\n');
    expect(text).toContain('TRUESHIFT_NOPE__X: no setting nope');
    expect(text).toMatch(/http\.port: .*70000/);
    expect(text).toMatch(/http: .*colour|http\.colour/);
    expect(text).toMatch(/analysis\.riskLevel: /);
    expect(result.problems.length).toBeGreaterThanOrEqual(4);
  });

  it('checks relations between settings and the subscriptions once the shapes are right', () => {
    const result = resolveConfig({
      mqtt: {
        reconnectMinMs: 5000,
        reconnectMaxMs: 100,
        subscriptions: [{ filter: 'a/#/b', tag: '{3}', format: 'json' }],
      },
    });
    expect(result.ok).toBe(false);
    if (result.ok) return;
    const text = result.problems.join('\n');
    expect(text).toContain('mqtt.reconnectMaxMs: must not be below mqtt.reconnectMinMs');
    expect(text).toContain('mqtt.subscriptions.0: ');
  });

  it('asks for what PostgreSQL, shared subscriptions and leases each need', () => {
    const result = resolveConfig({
      store: { kind: 'postgres' },
      mqtt: { sharedGroup: 'trueshift' },
      cluster: { leaseMs: 4000, renewMs: 3000 },
    });
    expect(result.ok).toBe(false);
    if (result.ok) return;
    expect(result.problems).toEqual([
      'store.url: a PostgreSQL URL is needed when store.kind is postgres',
      'mqtt.sharedGroup: shared subscriptions need an external MQTT 5 broker (set mqtt.url)',
      'cluster.renewMs: must be at most half of cluster.leaseMs',
    ]);
    const fine = resolveConfig({
      store: { kind: 'postgres', url: 'postgres://127.0.0.1:5432/trueshift', shards: 8 },
      mqtt: { url: 'mqtt://127.0.0.1:1883', sharedGroup: 'trueshift' },
    });
    if (!fine.ok) throw new Error(fine.problems.join('\n'));
    expect(fine.config.store.shards).toBe(8);
    expect(fine.config.cluster).toEqual({ instance: null, leaseMs: 15_000, renewMs: 3_000 });
  });

  it('refuses a file that is not a mapping', () => {
    expect(resolveConfig(['a'])).toEqual({
      ok: false,
      problems: ['(file): the configuration must be a mapping of settings'],
    });
  });

  it('freezes the result', () => {
    const result = resolveConfig({});
    if (!result.ok) throw new Error('expected a valid config');
    expect(Object.isFrozen(result.config)).toBe(true);
    expect(Object.isFrozen(result.config.mqtt.subscriptions[0])).toBe(true);
    expect(() => {
      (result.config.http as { port: number }).port = 1;
    }).toThrow(TypeError);
  });
});
