import { existsSync } from 'node:fs';
import { hostname } from 'node:os';
import { resolve } from 'node:path';
import type { ResolvedConfig } from '@trueshift/config';
import { TrueshiftError } from '@trueshift/errors';
import type { Store } from '@trueshift/store';

/** What the store-side commands say about working beside a running service. */
export const STORE_NOTE = `Works on the store the configuration names, directly, whether or not "trueshift start"
is running: SQLite in WAL mode lets readers and one writer share the file, and a write waits (busy
timeout) while the service commits; a PostgreSQL store is shared by every instance. The running
analyser picks new marks up from the store on its next poll, within about a second.`;

export interface StoreUse {
  /** Create the store when its file does not exist yet (import, token); otherwise refuse. */
  create: boolean;
}

/**
 * Opens the store named by the configuration (--config, else $TRUESHIFT_CONFIG, else
 * config/trueshift.yaml, else the defaults), runs `work`, and closes it. A command that only reads
 * or changes what is there does not leave an empty store file behind a typo in the path.
 */
export async function withStore<T>(
  configFile: string | undefined,
  use: StoreUse,
  work: (store: Store, config: ResolvedConfig) => Promise<T>,
): Promise<T> {
  // Loaded when used: @trueshift/app brings the whole service along, a second of start-up that
  // "trueshift help" and "analyse" should not pay.
  const { loadConfig, openConfiguredStore } = await import('@trueshift/app');
  const { config } = loadConfig(configFile === undefined ? {} : { file: configFile });
  if (config.store.kind === 'sqlite') {
    const path = resolve(config.store.path);
    if (!existsSync(path) && !use.create) {
      throw new TrueshiftError(
        'FILE_NOT_FOUND',
        `There is no store at ${path}: start trueshift, or import a history file, first (or name the configuration with --config).`,
      );
    }
  }
  // A command speaks to a shared database under a name of its own, so the instances take the
  // changes it makes (a mark, an acknowledgement) as another instance's and show them.
  const { store } = await openConfiguredStore(config, `cli-${hostname()}-${String(process.pid)}`);
  try {
    return await work(store, config);
  } finally {
    await store.close();
  }
}
