export { ConfigSchema, SubscriptionSchema } from './schema.js';
export type { Config, SubscriptionConfig } from './schema.js';
export { resolveConfig, applyEnvironment, ENV_PREFIX } from './resolve.js';
export type { ConfigResult, ResolvedConfig, DeepReadonly } from './resolve.js';
export { CAUTION } from './caution.js';
