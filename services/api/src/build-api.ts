import swagger from '@fastify/swagger';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import type { ResolvedConfig } from '@trueshift/config';
import { TrueshiftError, errorCatalogue } from '@trueshift/errors';
import { registerHttpIngest, SAMPLES_ROUTE } from '@trueshift/ingest';
import type { Store } from '@trueshift/store';
import Fastify from 'fastify';
import type { FastifyBaseLogger, FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import rateLimit from '@fastify/rate-limit';
import type { Logger } from 'pino';
import { authorize, identify } from './access.js';
import type { RouteScope } from './access.js';
import type { ApiContext } from './context.js';
import { errorHandler, notFoundHandler, toTrueshiftError } from './error-handler.js';
import { createEventHub } from './event-hub.js';
import type { EventHub, IntervalTimers } from './event-hub.js';
import type { ComponentHealth, TimeoutTimers } from './health.js';
import { alertRoutes } from './routes/alerts.js';
import { eventRoutes } from './routes/events.js';
import { evidenceRoutes } from './routes/evidence.js';
import { markRoutes } from './routes/marks.js';
import { configRoutes, operationsRoutes } from './routes/operations.js';
import { quarantineRoutes } from './routes/quarantine.js';
import { tagRoutes } from './routes/tags.js';
import { tokenRoutes } from './routes/tokens.js';
import { validatorCompiler } from './validation.js';

/** The change feed: an EventEmitter with 'alert', 'evidence' and (from other instances) 'mark'. */
export interface ApiEventSource {
  on(event: string, listener: (payload: unknown) => void): unknown;
  off(event: string, listener: (payload: unknown) => void): unknown;
}

export type ApiTimers = IntervalTimers & TimeoutTimers;

export interface ApiDeps {
  store: Store;
  config: ResolvedConfig;
  clock: () => number;
  log: Logger;
  events?: ApiEventSource;
  health?: () => ComponentHealth | Promise<ComponentHealth>;
  /** Called after an API write queued alert deliveries (the delivery loop's wake). */
  wakeDelivery?: () => void;
  timers?: ApiTimers;
  options?: ApiOptions;
}

export interface ApiOptions {
  /** Events kept for clients that resume; 1000 by default. */
  eventRingSize?: number;
  /** Comment lines on the event stream this often; 15 s by default. */
  heartbeatMs?: number;
  /** The reconnect delay EventSource is told to use; 3 s by default. */
  retryMs?: number;
  /** Not ready while the analyser is further behind than this many samples; 10 000 by default. */
  maxAnalyserLag?: number;
  /** Not ready when the store takes longer than this to answer; 2 s by default. */
  storeTimeoutMs?: number;
}

export const API_PREFIX = '/api/v1';
const EVENT_STREAM_BACKLOG_BYTES = 1 << 20;

/** Routes this service does not declare itself, with the scope they need. */
const MOUNTED_SCOPES: Readonly<Record<string, RouteScope>> = {
  [`POST ${SAMPLES_ROUTE}`]: 'write',
};

function scopeOf(request: FastifyRequest): RouteScope {
  const declared = request.routeOptions.config.scope;
  if (declared !== undefined) return declared;
  // A route that says nothing is the most closely guarded, so forgetting a scope fails safe.
  return MOUNTED_SCOPES[`${request.method} ${request.routeOptions.url ?? ''}`] ?? 'admin';
}

function isWrite(request: FastifyRequest, scope: RouteScope): boolean {
  return (
    (scope === 'write' || scope === 'admin') &&
    request.method !== 'GET' &&
    request.method !== 'HEAD'
  );
}

/** Answers with the catalogue body from a hook, so routes with their own error handler answer alike. */
function refuse(reply: FastifyReply, error: TrueshiftError): FastifyReply {
  return reply.code(errorCatalogue[error.code].status).send(error.toBody());
}

/**
 * The HTTP API. Everything under /api/v1 needs a bearer token with the route's scope (read, write
 * or admin), except the OpenAPI document; with http.readWithoutToken, read routes answer anyone.
 * Write routes are rate limited per token (per address without one).
 */
export async function buildApi(deps: ApiDeps): Promise<FastifyInstance> {
  const { store, config, clock, log } = deps;
  const timers: ApiTimers = deps.timers ?? {
    setInterval: (callback, ms) => setInterval(callback, ms),
    clearInterval: (handle) => {
      clearInterval(handle as NodeJS.Timeout);
    },
    setTimeout: (callback, ms) => setTimeout(callback, ms),
    clearTimeout: (handle) => {
      clearTimeout(handle as NodeJS.Timeout);
    },
  };
  const options = deps.options ?? {};
  const hub: EventHub = createEventHub({
    clock,
    timers,
    ringSize: options.eventRingSize ?? 1000,
    heartbeatMs: options.heartbeatMs ?? 15_000,
    maxBacklogBytes: EVENT_STREAM_BACKLOG_BYTES,
  });
  const ctx: ApiContext = {
    store,
    config,
    clock,
    hub,
    wakeDelivery: deps.wakeDelivery ?? (() => undefined),
  };

  // Typed as Fastify's logger so the instance fits plugins written against plain FastifyInstance.
  const logger: FastifyBaseLogger = log;
  const app = Fastify({
    loggerInstance: logger,
    bodyLimit: config.http.bodyLimitBytes,
    // Tag names run to 200 characters, more once percent-encoded.
    routerOptions: { maxParamLength: 1024 },
  });
  app.setValidatorCompiler(validatorCompiler());
  app.setErrorHandler(errorHandler);
  app.setNotFoundHandler(notFoundHandler);
  app.decorateRequest('caller', null);

  await app.register(swagger, {
    openapi: {
      openapi: '3.0.3',
      info: {
        title: 'trueshift',
        version: '0.1.0',
        description:
          'Tells process engineers whether a shift in a process tag after a plant change is real, and the risk of being wrong. Statistical evidence is advisory and is not a safety function.',
      },
      components: {
        securitySchemes: { bearer: { type: 'http', scheme: 'bearer' } },
      },
      security: [{ bearer: [] }],
    },
  });
  await app.register(rateLimit, { global: false });
  const writeLimit = app.createRateLimit({
    max: config.http.writeRatePerMinute,
    timeWindow: 60_000,
    keyGenerator: (request: FastifyRequest) =>
      request.caller?.kind === 'token' ? `token:${request.caller.id}` : `ip:${request.ip}`,
  });

  app.addHook('onRoute', (route) => {
    // Routes mounted from other services get their documentation here.
    if (route.url === SAMPLES_ROUTE && route.method === 'POST') {
      route.schema = {
        ...route.schema,
        summary: 'Store a batch of samples: a JSON array of { tag, t | time, value, quality? }',
        tags: ['samples'],
      };
    }
  });

  // Before the body is read: a refused caller costs no parsing.
  app.addHook('onRequest', async (request, reply) => {
    if (request.is404) return;
    const scope = scopeOf(request);
    if (scope === 'public') return;
    try {
      request.caller = await identify(store, request.headers.authorization);
      authorize(request.caller, scope, config.http.readWithoutToken);
    } catch (error) {
      const refusal = toTrueshiftError(error);
      if (refusal.code === 'INTERNAL') request.log.error({ err: error }, 'cannot check the token');
      return refuse(reply, refusal);
    }
    if (isWrite(request, scope)) {
      const limit = await writeLimit(request);
      if (!limit.isAllowed) {
        void reply.header('x-ratelimit-limit', limit.max);
        void reply.header('x-ratelimit-remaining', limit.remaining);
        if (limit.isExceeded) {
          void reply.header('retry-after', limit.ttlInSeconds);
          return refuse(
            reply,
            new TrueshiftError('RATE_LIMITED', `Try again in ${limit.ttlInSeconds} s.`),
          );
        }
      }
    }
    return undefined;
  });

  app.register(
    (plain, _options, done) => {
      const api = plain.withTypeProvider<TypeBoxTypeProvider>();
      api.get(
        '/openapi.json',
        {
          config: { scope: 'public' },
          schema: { summary: 'This API as an OpenAPI 3 document', tags: ['operations'] },
        },
        () => app.swagger(),
      );
      tagRoutes(api, ctx);
      markRoutes(api, ctx);
      evidenceRoutes(api, ctx);
      alertRoutes(api, ctx);
      quarantineRoutes(api, ctx);
      tokenRoutes(api, ctx);
      configRoutes(api, ctx);
      eventRoutes(api, ctx, options.retryMs ?? 3000);
      done();
    },
    { prefix: API_PREFIX },
  );
  registerHttpIngest(app, {
    store,
    clock,
    options: {
      maxSamples: config.ingest.httpMaxSamples,
      maxFutureMs: config.ingest.maxFutureMs,
      maxBodyBytes: config.http.bodyLimitBytes,
    },
  });
  operationsRoutes(app.withTypeProvider<TypeBoxTypeProvider>(), {
    ctx,
    health: deps.health,
    maxAnalyserLag: options.maxAnalyserLag ?? 10_000,
    storeTimeoutMs: options.storeTimeoutMs ?? 2000,
    timers,
  });

  const source = deps.events;
  if (source !== undefined) {
    const onAlert = (payload: unknown): void => {
      hub.publish('alert', payload);
    };
    const onEvidence = (payload: unknown): void => {
      hub.publish('evidence', payload);
    };
    // Mark changes made through this API are published by its routes; these come from elsewhere
    // (another instance sharing the database).
    const onMark = (payload: unknown): void => {
      hub.publish('mark', payload);
    };
    source.on('alert', onAlert);
    source.on('evidence', onEvidence);
    source.on('mark', onMark);
    app.addHook('onClose', () => {
      source.off('alert', onAlert);
      source.off('evidence', onEvidence);
      source.off('mark', onMark);
    });
  }
  // Streams end first, so clients reconnect elsewhere instead of hanging on a closing server.
  app.addHook('preClose', () => {
    hub.closeAll();
  });
  return app;
}

/** Starts listening on the configured address: loopback unless the configuration says otherwise. */
export async function listenApi(app: FastifyInstance, config: ResolvedConfig): Promise<string> {
  return app.listen({ host: config.http.host, port: config.http.port });
}
