import { Type } from '@sinclair/typebox';
import type { ResolvedConfig } from '@trueshift/config';
import type { ApiApp, ApiContext } from '../context.js';
import type { ComponentHealth, TimeoutTimers } from '../health.js';
import { readiness } from '../health.js';
import { collectMetrics } from '../metrics.js';
import { errors } from '../schemas.js';

export interface OperationsOptions {
  ctx: ApiContext;
  health: (() => ComponentHealth | Promise<ComponentHealth>) | undefined;
  maxAnalyserLag: number;
  storeTimeoutMs: number;
  timers: TimeoutTimers;
}

const REDACTED = '(set, not shown)';

/** The configuration as an admin may see it: secrets are only said to be set. */
export function redactConfig(config: ResolvedConfig): unknown {
  const copy = structuredClone(config) as unknown as {
    mqtt: { password?: string };
    webhooks: { url: string; secret?: string }[];
  };
  if (copy.mqtt.password !== undefined) copy.mqtt.password = REDACTED;
  for (const hook of copy.webhooks) {
    if (hook.secret !== undefined) hook.secret = REDACTED;
  }
  return copy;
}

const Check = Type.Object({ ok: Type.Boolean(), detail: Type.Union([Type.String(), Type.Null()]) });
const ReadinessBody = Type.Object({
  ready: Type.Boolean(),
  checks: Type.Object({
    store: Check,
    ingest: Type.Union([Check, Type.Null()]),
    analyser: Type.Union([
      Type.Object({ ok: Type.Boolean(), lag: Type.Number(), maxLag: Type.Number() }),
      Type.Null(),
    ]),
  }),
  reasons: Type.Array(Type.String()),
});

/** Liveness, readiness and metrics sit outside /api/v1: probes and scrapers expect them at the root. */
export function operationsRoutes(app: ApiApp, options: OperationsOptions): void {
  const { ctx, health } = options;

  app.get(
    '/health',
    {
      config: { scope: 'public' },
      schema: {
        summary: 'Liveness: the process answers',
        tags: ['operations'],
        response: { 200: Type.Object({ status: Type.Literal('ok') }) },
      },
    },
    () => ({ status: 'ok' as const }),
  );

  app.get(
    '/ready',
    {
      config: { scope: 'public' },
      schema: {
        summary: 'Readiness: the store answers, ingest is connected, the analyser keeps up',
        tags: ['operations'],
        response: { 200: ReadinessBody, 503: ReadinessBody },
      },
    },
    async (_request, reply) => {
      const result = await readiness(
        ctx.store,
        health,
        { maxAnalyserLag: options.maxAnalyserLag, storeTimeoutMs: options.storeTimeoutMs },
        options.timers,
      );
      return reply.code(result.ready ? 200 : 503).send(result);
    },
  );

  app.get(
    '/metrics',
    {
      config: { scope: 'read' },
      schema: {
        summary: 'Counters and gauges in the Prometheus text format',
        tags: ['operations'],
        response: { 200: Type.String(), ...errors(401, 403) },
      },
    },
    async (_request, reply) => {
      const parts = health === undefined ? {} : await health();
      const text = await collectMetrics(ctx.store, parts, ctx.hub.clients());
      return reply.type('text/plain; version=0.0.4; charset=utf-8').send(text);
    },
  );
}

export function configRoutes(app: ApiApp, ctx: ApiContext): void {
  app.get(
    '/config',
    {
      config: { scope: 'admin' },
      schema: {
        summary: 'The configuration in force, with secrets left out',
        tags: ['admin'],
        response: { 200: Type.Unknown(), ...errors(401, 403) },
      },
    },
    () => redactConfig(ctx.config),
  );
}
