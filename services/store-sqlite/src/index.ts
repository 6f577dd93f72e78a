export { openSqliteStore, SqliteStore } from './sqlite-store.js';
export type { SqliteStoreOptions } from './sqlite-store.js';
export { applyMigrations, migrations } from './migrations.js';
