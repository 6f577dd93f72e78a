export { openPostgresStore, PostgresStore } from './postgres-store.js';
export type { PostgresStoreOptions } from './postgres-store.js';
export { applyMigrations, migrations } from './migrations.js';
export { parseClusterMessage } from './listener.js';
export { isUnavailable } from './unavailable.js';
