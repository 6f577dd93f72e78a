import { Value } from '@sinclair/typebox/value';
import { subscriptionProblems } from '@trueshift/formats';
import { ConfigSchema } from './schema.js';
import type { Config } from './schema.js';

export type DeepReadonly<T> = T extends (infer U)[]
  ? readonly DeepReadonly<U>[]
  : T extends object
    ? { readonly [K in keyof T]: DeepReadonly<T[K]> }
    : T;

export type ResolvedConfig = DeepReadonly<Config>;

export type ConfigResult = { ok: true; config: ResolvedConfig } | { ok: false; problems: string[] };

/** Environment variables that override the file: TRUESHIFT_HTTP__PORT=9000 sets http.port. */
export const ENV_PREFIX = 'TRUESHIFT_';

function isRecord(value: unknown): value is Record<string, unknown> {
  return typeof value === 'object' && value !== null && !Array.isArray(value);
}

/** An environment value: JSON where it parses (numbers, booleans, null, arrays), else the text. */
function envValue(text: string): unknown {
  try {
    return JSON.parse(text) as unknown;
  } catch {
    return text;
  }
}

/**
 * Applies TRUESHIFT_A__B=value overrides onto a copy of the file's object. Keys are matched to the
 * schema's names without regard to case, so TRUESHIFT_MQTT__CLIENTID reaches mqtt.clientId.
 */
export function applyEnvironment(
  file: Record<string, unknown>,
  env: Readonly<Record<string, string | undefined>>,
  problems: string[],
): Record<string, unknown> {
  const result = structuredClone(file);
  for (const [name, text] of Object.entries(env)) {
    if (!name.startsWith(ENV_PREFIX) || text === undefined) continue;
    const path = name.slice(ENV_PREFIX.length).split('__');
    let target: Record<string, unknown> = result;
    let schema: unknown = ConfigSchema;
    for (let i = 0; i < path.length; i++) {
      const properties = isRecord(schema) && isRecord(schema.properties) ? schema.properties : null;
      const key = properties
        ? Object.keys(properties).find((k) => k.toLowerCase() === (path[i] ?? '').toLowerCase())
        : undefined;
      if (key === undefined || properties === null) {
        problems.push(
          `${name}: no setting ${path
            .slice(0, i + 1)
            .join('.')
            .toLowerCase()}`,
        );
        break;
      }
      schema = properties[key];
      if (i === path.length - 1) {
        target[key] = envValue(text);
      } else {
        const next = target[key];
        if (!isRecord(next)) target[key] = {};
        target = target[key] as Record<string, unknown>;
      }
    }
  }
  return result;
}

function deepFreeze<T>(value: T): T {
  if (typeof value === 'object' && value !== null) {
    for (const inner of Object.values(value)) deepFreeze(inner);
    Object.freeze(value);
  }
  return value;
}

/**
 * The configuration from a parsed file (or nothing) and the environment, with every default filled
 * in, validated once with every problem listed by its path, then frozen.
 */
export function resolveConfig(
  file: unknown,
  env: Readonly<Record<string, string | undefined>> = {},
): ConfigResult {
  const problems: string[] = [];
  if (file !== undefined && file !== null && !isRecord(file)) {
    return { ok: false, problems: ['(file): the configuration must be a mapping of settings'] };
  }
  const merged = applyEnvironment(isRecord(file) ? file : {}, env, problems);
  const withDefaults = Value.Default(ConfigSchema, merged);
  for (const error of Value.Errors(ConfigSchema, withDefaults)) {
    const path = error.path === '' ? '(top)' : error.path.slice(1).replaceAll('/', '.');
    problems.push(`${path}: ${error.message}${describeValue(error.value)}`);
  }
  if (problems.length === 0) {
    const config = withDefaults as Config;
    if (config.mqtt.reconnectMaxMs < config.mqtt.reconnectMinMs) {
      problems.push('mqtt.reconnectMaxMs: must not be below mqtt.reconnectMinMs');
    }
    if (config.delivery.maxDelayMs < config.delivery.baseDelayMs) {
      problems.push('delivery.maxDelayMs: must not be below delivery.baseDelayMs');
    }
    if (config.store.kind === 'postgres' && config.store.url === null) {
      problems.push('store.url: a PostgreSQL URL is needed when store.kind is postgres');
    }
    if (config.mqtt.sharedGroup !== null && config.mqtt.url === null) {
      problems.push(
        'mqtt.sharedGroup: shared subscriptions need an external MQTT 5 broker (set mqtt.url)',
      );
    }
    if (config.cluster.renewMs * 2 > config.cluster.leaseMs) {
      problems.push('cluster.renewMs: must be at most half of cluster.leaseMs');
    }
    config.mqtt.subscriptions.forEach((spec, i) => {
      for (const problem of subscriptionProblems(spec)) {
        problems.push(`mqtt.subscriptions.${i}: ${problem}`);
      }
    });
  }
  if (problems.length > 0) return { ok: false, problems: [...new Set(problems)] };
  return { ok: true, config: deepFreeze(withDefaults as Config) };
}

function describeValue(value: unknown): string {
  if (value === undefined) return '';
  const text = JSON.stringify(value);
  return text.length > 60 ? ` (got ${text.slice(0, 57)}...)` : ` (got ${text})`;
}
