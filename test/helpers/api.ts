/**
 * A real API over a real SQLite file in a temporary folder, with one token per scope. The clock is
 * a plain number the test moves; the server, when started, listens on 127.0.0.1 only.
 */
import { mkdtemp, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { pino } from 'pino';
import { buildApi, issueToken } from '@trueshift/api';
import type { ApiDeps, ApiOptions } from '@trueshift/api';
import { resolveConfig } from '@trueshift/config';
import type { ResolvedConfig } from '@trueshift/config';
import { openSqliteStore } from '@trueshift/store-sqlite';
import type { SqliteStore } from '@trueshift/store-sqlite';
import type { FastifyInstance } from 'fastify';

export const T0 = Date.UTC(2026, 5, 1, 6, 0, 0);

export interface TestApi {
  app: FastifyInstance;
  store: SqliteStore;
  config: ResolvedConfig;
  dir: string;
  now: { t: number };
  tokens: { read: string; write: string; admin: string };
  /** Authorization headers for a scope. */
  as(scope: 'read' | 'write' | 'admin'): { authorization: string };
  /** Starts listening on a free loopback port; gives the base URL. */
  listen(): Promise<string>;
  close(): Promise<void>;
}

export function testConfig(overrides: Record<string, unknown> = {}): ResolvedConfig {
  const result = resolveConfig({ http: { host: '127.0.0.1', port: 0 }, ...overrides });
  if (!result.ok) throw new Error(result.problems.join('\n'));
  return result.config;
}

export async function startTestApi(
  options: {
    config?: Record<string, unknown>;
    deps?: Partial<Pick<ApiDeps, 'events' | 'health' | 'wakeDelivery' | 'timers'>>;
    /** Parts built on the test's store and clock, e.g. a real analyser for `events`. */
    around?: (
      store: SqliteStore,
      clock: () => number,
    ) => Partial<Pick<ApiDeps, 'events' | 'health'>>;
    api?: ApiOptions;
  } = {},
): Promise<TestApi> {
  const dir = await mkdtemp(join(tmpdir(), 'trueshift-api-'));
  const store = openSqliteStore({ path: join(dir, 'store.db') });
  const config = testConfig(options.config);
  const now = { t: T0 };
  const clock = (): number => now.t;
  const [read, write, admin] = await Promise.all([
    issueToken(store, 'reader', ['read'], T0),
    issueToken(store, 'writer', ['write'], T0),
    issueToken(store, 'admin', ['admin'], T0),
  ]);
  const app = await buildApi({
    store,
    config,
    clock,
    log: pino({ level: process.env.TRUESHIFT_TEST_LOG ?? 'silent' }),
    ...options.deps,
    ...options.around?.(store, clock),
    ...(options.api === undefined ? {} : { options: options.api }),
  });
  const tokens = { read: read.secret, write: write.secret, admin: admin.secret };
  return {
    app,
    store,
    config,
    dir,
    now,
    tokens,
    as: (scope) => ({ authorization: `Bearer ${tokens[scope]}` }),
    async listen() {
      await app.listen({ host: '127.0.0.1', port: 0 });
      const address = app.server.address();
      if (address === null || typeof address === 'string') throw new Error('no port');
      return `http://127.0.0.1:${address.port}`;
    },
    async close() {
      await app.close();
      await store.close();
      await rm(dir, { recursive: true, force: true });
    },
  };
}
