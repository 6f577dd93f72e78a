import { mkdir } from 'node:fs/promises';
import { hostname } from 'node:os';
import { dirname } from 'node:path';
import type { ResolvedConfig } from '@trueshift/config';
import type { ClusterStore, Store } from '@trueshift/store';
import { openPostgresStore } from '@trueshift/store-postgres';
import { openSqliteStore } from '@trueshift/store-sqlite';

export interface OpenedStore {
  store: Store;
  /** The same store when instances share it (PostgreSQL); null for a SQLite file. */
  shared: ClusterStore | null;
}

/** This instance's name among those sharing a database: the configured one, else the host name. */
export function instanceName(config: ResolvedConfig): string {
  return config.cluster.instance ?? hostname();
}

/**
 * The store the configuration names: the SQLite file (created with its folder when missing), or
 * the PostgreSQL database shared by every instance, speaking as `instance`.
 */
export async function openConfiguredStore(
  config: ResolvedConfig,
  instance: string = instanceName(config),
): Promise<OpenedStore> {
  if (config.store.kind === 'postgres' && config.store.url !== null) {
    const shared = await openPostgresStore({
      url: config.store.url,
      shards: config.store.shards,
      instance,
      poolSize: config.store.poolSize,
    });
    return { store: shared, shared };
  }
  await mkdir(dirname(config.store.path), { recursive: true });
  return { store: openSqliteStore({ path: config.store.path }), shared: null };
}
