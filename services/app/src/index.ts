export { startApp } from './build-app.js';
export type { AppDeps, RunningApp } from './build-app.js';
export { loadConfig, DEFAULT_CONFIG_FILE } from './load-config.js';
export type { LoadedConfig } from './load-config.js';
export { createLogger } from './logger.js';
export { instanceName, openConfiguredStore } from './open-store.js';
export type { OpenedStore } from './open-store.js';
