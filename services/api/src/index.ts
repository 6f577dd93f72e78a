export { buildApi, listenApi, API_PREFIX } from './build-api.js';
export type { ApiDeps, ApiEventSource, ApiOptions, ApiTimers } from './build-api.js';
export { issueToken, hashToken, grants } from './access.js';
export type { Caller, RouteScope } from './access.js';
export type { ComponentHealth, Readiness } from './health.js';
export type { StreamEvent, StreamEventKind } from './event-hub.js';
export { thinIndices } from './thin.js';
