/**
 * Fault injection for a real store: every call goes to the store underneath, except that each
 * writeSamples first runs a hook that may wait (hold a commit back) or throw (a failing disk).
 */
import type { SampleInput, Store } from '@trueshift/store';

export interface WriteHookCall {
  /** 1 for the first writeSamples call. */
  call: number;
  samples: readonly SampleInput[];
}

export type FaultyStore = Store & { readonly writeCalls: number };

export function withWriteHook(
  store: Store,
  hook: (call: WriteHookCall) => Promise<void> | void,
): FaultyStore {
  let writeCalls = 0;
  const writeSamples: Store['writeSamples'] = async (samples) => {
    writeCalls++;
    await hook({ call: writeCalls, samples });
    return store.writeSamples(samples);
  };
  return new Proxy(store, {
    get(target, property) {
      if (property === 'writeSamples') return writeSamples;
      if (property === 'writeCalls') return writeCalls;
      const value: unknown = Reflect.get(target, property, target);
      return typeof value === 'function'
        ? (value as (...args: unknown[]) => unknown).bind(target)
        : value;
    },
  }) as FaultyStore;
}

/** writeSamples rejects for the first `failures` calls, as a full disk or a locked file would. */
export function failingFirstWrites(store: Store, failures: number): FaultyStore {
  return withWriteHook(store, ({ call }) => {
    if (call <= failures) throw new Error(`injected store failure ${call} of ${failures}`);
  });
}

/** Waits until `check` holds, polling; throws with `what` after timeoutMs. */
export async function waitFor(
  check: () => Promise<boolean> | boolean,
  what: string,
  timeoutMs = 10_000,
): Promise<void> {
  const deadline = Date.now() + timeoutMs;
  for (;;) {
    if (await check()) return;
    if (Date.now() > deadline)
      throw new Error(`timed out after ${timeoutMs} ms waiting for ${what}`);
    await new Promise((resolve) => setTimeout(resolve, 20));
  }
}
