import type { Store } from '@trueshift/store';

/** What the rest of the process reports about itself; parts this process does not run are left out. */
export interface ComponentHealth {
  ingest?: { connected: boolean; detail?: string | null };
  /** How far the analyser is behind the newest stored sample, in samples. */
  analyser?: { lag: number };
}

export interface Readiness {
  ready: boolean;
  checks: {
    store: { ok: boolean; detail: string | null };
    ingest: { ok: boolean; detail: string | null } | null;
    analyser: { ok: boolean; lag: number; maxLag: number } | null;
  };
  reasons: string[];
}

export interface TimeoutTimers {
  setTimeout(callback: () => void, ms: number): unknown;
  clearTimeout(handle: unknown): void;
}

async function withTimeout<T>(
  timers: TimeoutTimers,
  work: Promise<T>,
  ms: number,
  what: string,
): Promise<T> {
  let timer: unknown = null;
  const timeout = new Promise<never>((_, reject) => {
    timer = timers.setTimeout(() => {
      reject(new Error(`${what} did not answer within ${ms} ms`));
    }, ms);
  });
  try {
    return await Promise.race([work, timeout]);
  } finally {
    timers.clearTimeout(timer);
  }
}

export async function readiness(
  store: Store,
  health: (() => ComponentHealth | Promise<ComponentHealth>) | undefined,
  bounds: { maxAnalyserLag: number; storeTimeoutMs: number },
  timers: TimeoutTimers,
): Promise<Readiness> {
  const reasons: string[] = [];
  let storeCheck: Readiness['checks']['store'];
  try {
    await withTimeout(timers, store.lastSeq(), bounds.storeTimeoutMs, 'the store');
    storeCheck = { ok: true, detail: null };
  } catch (error) {
    const detail = error instanceof Error ? error.message : String(error);
    storeCheck = { ok: false, detail };
    reasons.push(`store: ${detail}`);
  }
  let parts: ComponentHealth = {};
  try {
    parts = health === undefined ? {} : await health();
  } catch (error) {
    reasons.push(`health: ${error instanceof Error ? error.message : String(error)}`);
  }
  let ingest: Readiness['checks']['ingest'] = null;
  if (parts.ingest !== undefined) {
    ingest = { ok: parts.ingest.connected, detail: parts.ingest.detail ?? null };
    if (!parts.ingest.connected) {
      reasons.push(`ingest: not connected${ingest.detail === null ? '' : ` (${ingest.detail})`}`);
    }
  }
  let analyser: Readiness['checks']['analyser'] = null;
  if (parts.analyser !== undefined) {
    const { lag } = parts.analyser;
    const ok = lag <= bounds.maxAnalyserLag;
    analyser = { ok, lag, maxLag: bounds.maxAnalyserLag };
    if (!ok) reasons.push(`analyser: ${lag} samples behind, more than ${bounds.maxAnalyserLag}`);
  }
  return {
    ready: reasons.length === 0,
    checks: { store: storeCheck, ingest, analyser },
    reasons,
  };
}
