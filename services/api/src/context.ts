import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import type { ResolvedTagSettings } from '@trueshift/analyser';
import type { ResolvedConfig } from '@trueshift/config';
import type { Store } from '@trueshift/store';
import type {
  FastifyBaseLogger,
  FastifyInstance,
  RawReplyDefaultExpression,
  RawRequestDefaultExpression,
  RawServerDefault,
} from 'fastify';
import type { Caller, RouteScope } from './access.js';
import type { EventHub } from './event-hub.js';

declare module 'fastify' {
  interface FastifyRequest {
    /** Set by the access hook: the token's owner, or null when no token was sent. */
    caller: Caller | null;
  }
  interface FastifyContextConfig {
    /** What the caller needs; a route without one is treated as admin-only. */
    scope?: RouteScope;
  }
}

/** The instance routes are declared on: request types come from their TypeBox schemas. */
export type ApiApp = FastifyInstance<
  RawServerDefault,
  RawRequestDefaultExpression,
  RawReplyDefaultExpression,
  FastifyBaseLogger,
  TypeBoxTypeProvider
>;

/** What every route module gets. */
export interface ApiContext {
  store: Store;
  config: ResolvedConfig;
  clock: () => number;
  hub: EventHub;
  /** Called after a write queued alert deliveries, so they leave now rather than at the next poll. */
  wakeDelivery: () => void;
}

/** The service's analysis settings as defaults for every tag, as the analyser reads them. */
export function analysisDefaults(config: ResolvedConfig): Partial<ResolvedTagSettings> {
  const a = config.analysis;
  return {
    riskLevel: a.riskLevel,
    nBefore: a.nBefore,
    alertAfter: a.alertAfter,
    inControlArl: a.inControlArl,
    cusumK: a.cusumK,
    ewmaLambda: a.ewmaLambda,
    staleAfterIntervals: a.staleAfterIntervals,
    stuckAfter: a.stuckAfter,
  };
}
