import { createHmac } from 'node:crypto';
import type { ResolvedConfig } from '@trueshift/config';
import type { OutboxRecord, Store } from '@trueshift/store';
import type { Logger } from 'pino';
import { retryAfterMs, retryDelay } from './back-off.js';

export interface DeliveryTimers {
  setTimeout(callback: () => void, ms: number): unknown;
  clearTimeout(handle: unknown): void;
}

export interface DeliveryDeps {
  store: Store;
  clock: () => number;
  log: Logger;
  fetch?: typeof fetch;
  /** Publishes at QoS 1 and resolves once the broker acknowledged (PUBACK). */
  publishMqtt?: (topic: string, payload: string) => Promise<void>;
  options: ResolvedConfig['delivery'];
  /** Webhook secrets by URL: a body to a webhook with a secret is signed with it. */
  webhooks?: ResolvedConfig['webhooks'];
  random?: () => number;
  timers: DeliveryTimers;
  /** How often the outbox is looked at when nothing wakes the loop; 1 s by default. */
  pollMs?: number;
  /** A webhook that has not answered within this is a failed attempt; 10 s by default. */
  requestTimeoutMs?: number;
  /** Entries attempted at once; 8 by default. */
  concurrency?: number;
  /**
   * Whether this process delivers now. Instances sharing one database leave delivery to one of
   * them (the holder of shard 0), so two never send the same entry at once.
   */
  active?: () => boolean;
}

export interface DrainResult {
  attempted: number;
  delivered: number;
  retrying: number;
  dead: number;
}

export interface Delivery {
  /** Starts the loop; it keeps draining until stop(). */
  start(): void;
  /** Stops the loop and waits for attempts in flight. */
  stop(): Promise<void>;
  /** Looks at the outbox now instead of at the next poll, e.g. right after an alert changed. */
  wake(): void;
  /** One pass over what is due now; the loop calls it, tests may call it directly. */
  drainOnce(): Promise<DrainResult>;
}

/** Outcome of one attempt: `permanent` failures are not retried. */
type Attempt =
  { ok: true } | { ok: false; permanent: boolean; error: string; notBeforeMs: number | null };

const BATCH = 100;

/** The body a receiver gets: the change and the alert, and the key to drop repeats by. */
export function deliveryBody(entry: Pick<OutboxRecord, 'idempotencyKey' | 'payload'>): string {
  const payload =
    typeof entry.payload === 'object' && entry.payload !== null && !Array.isArray(entry.payload)
      ? (entry.payload as Record<string, unknown>)
      : { payload: entry.payload };
  return JSON.stringify({ idempotencyKey: entry.idempotencyKey, ...payload });
}

/** Hex HMAC-SHA256 of the body, sent as `Trueshift-Signature: sha256=<hex>`. */
export function signBody(secret: string, body: string): string {
  return `sha256=${createHmac('sha256', secret).update(body, 'utf8').digest('hex')}`;
}

function describe(error: unknown): string {
  if (error instanceof Error) {
    const cause = error.cause instanceof Error ? `: ${error.cause.message}` : '';
    return `${error.message}${cause}`;
  }
  return String(error);
}

/**
 * Drains the store's outbox: each entry goes to its webhook (POST, JSON) or to the MQTT alert
 * topic. Delivery is at least once; receivers drop repeats by the Idempotency-Key, which stays
 * the same across attempts. The queue lives in the store, so entries pending when the process
 * stops are sent after it starts again.
 */
export function buildDelivery(deps: DeliveryDeps): Delivery {
  const { store, clock, log, options, timers } = deps;
  const doFetch = deps.fetch ?? fetch;
  const random = deps.random ?? Math.random;
  const pollMs = deps.pollMs ?? 1000;
  const requestTimeoutMs = deps.requestTimeoutMs ?? 10_000;
  const concurrency = deps.concurrency ?? 8;
  const secrets = new Map<string, string>();
  for (const hook of deps.webhooks ?? []) {
    if (hook.secret !== undefined) secrets.set(hook.url, hook.secret);
  }

  /*
   * A target that just failed is left alone until its entry's next attempt, in memory only: later
   * entries to it wait behind the failed one, so a receiver that is down gets one request per
   * back-off step rather than one per queued alert, and changes reach it in order.
   */
  const targetBlockedUntil = new Map<string, number>();

  let running = false;
  let timer: unknown = null;
  let draining: Promise<DrainResult> | null = null;
  let wakeAgain = false;

  async function postWebhook(entry: OutboxRecord): Promise<Attempt> {
    const body = deliveryBody(entry);
    const headers: Record<string, string> = {
      'content-type': 'application/json',
      'idempotency-key': entry.idempotencyKey,
      'user-agent': 'trueshift-delivery',
    };
    const secret = secrets.get(entry.target);
    if (secret !== undefined) headers['trueshift-signature'] = signBody(secret, body);
    const abort = new AbortController();
    const timeout = timers.setTimeout(() => {
      abort.abort(new Error(`no answer within ${requestTimeoutMs} ms`));
    }, requestTimeoutMs);
    try {
      const response = await doFetch(entry.target, {
        method: 'POST',
        headers,
        body,
        signal: abort.signal,
        // A receiver that moved is a configuration matter; following would turn the POST into a GET.
        redirect: 'manual',
      });
      // The body is not needed, but reading it lets the connection be reused.
      await response.arrayBuffer().catch(() => undefined);
      const status = response.status;
      if (status >= 200 && status < 300) return { ok: true };
      const permanent = status >= 400 && status < 500 && status !== 408 && status !== 429;
      return {
        ok: false,
        permanent,
        error: `HTTP ${status}${response.statusText === '' ? '' : ` ${response.statusText}`}`,
        notBeforeMs: retryAfterMs(response.headers.get('retry-after'), clock()),
      };
    } catch (error) {
      return { ok: false, permanent: false, error: describe(error), notBeforeMs: null };
    } finally {
      timers.clearTimeout(timeout);
    }
  }

  async function publish(entry: OutboxRecord): Promise<Attempt> {
    if (deps.publishMqtt === undefined) {
      return {
        ok: false,
        permanent: false,
        error: 'no MQTT connection to publish on',
        notBeforeMs: null,
      };
    }
    try {
      await deps.publishMqtt(entry.target, deliveryBody(entry));
      return { ok: true };
    } catch (error) {
      return { ok: false, permanent: false, error: describe(error), notBeforeMs: null };
    }
  }

  async function attempt(entry: OutboxRecord, result: DrainResult): Promise<void> {
    result.attempted += 1;
    const outcome = entry.channel === 'webhook' ? await postWebhook(entry) : await publish(entry);
    const now = clock();
    if (outcome.ok) {
      await store.markDelivered(entry.id, now);
      result.delivered += 1;
      log.debug({ outbox: entry.id, target: entry.target }, 'alert change delivered');
      return;
    }
    const failures = entry.attempts + 1;
    const dead = outcome.permanent || failures >= options.maxAttempts;
    const delay = Math.min(
      options.maxDelayMs,
      Math.max(retryDelay(failures, options, random), outcome.notBeforeMs ?? 0),
    );
    const next = now + delay;
    await store.markAttemptFailed(entry.id, outcome.error, next, dead);
    if (dead) {
      result.dead += 1;
      log.error(
        { outbox: entry.id, target: entry.target, attempts: failures, error: outcome.error },
        outcome.permanent
          ? 'alert delivery refused by the receiver; not retried'
          : 'alert delivery gave up after its last attempt',
      );
    } else {
      result.retrying += 1;
      targetBlockedUntil.set(`${entry.channel}:${entry.target}`, next);
      log.warn(
        {
          outbox: entry.id,
          target: entry.target,
          attempts: failures,
          retryInMs: delay,
          error: outcome.error,
        },
        'alert delivery failed; will retry',
      );
    }
  }

  async function drain(): Promise<DrainResult> {
    const result: DrainResult = { attempted: 0, delivered: 0, retrying: 0, dead: 0 };
    if (deps.active?.() === false) return result;
    const now = clock();
    const due = await store.dueOutbox(now, BATCH);
    const queue = due.filter((entry) => {
      const key = `${entry.channel}:${entry.target}`;
      const until = targetBlockedUntil.get(key);
      if (until === undefined) return true;
      if (until <= now) {
        targetBlockedUntil.delete(key);
        return true;
      }
      return false;
    });
    // Entries to one target go one after another, in queue order; targets go side by side.
    const byTarget = new Map<string, OutboxRecord[]>();
    for (const entry of queue) {
      const key = `${entry.channel}:${entry.target}`;
      const list = byTarget.get(key);
      if (list === undefined) byTarget.set(key, [entry]);
      else list.push(entry);
    }
    const lanes = [...byTarget.entries()];
    const worker = async (): Promise<void> => {
      for (;;) {
        const lane = lanes.shift();
        if (lane === undefined) return;
        const [key, entries] = lane;
        for (const entry of entries) {
          await attempt(entry, result);
          // Once a target fails, the rest of its entries wait for the next round.
          if (targetBlockedUntil.has(key)) break;
        }
      }
    };
    await Promise.all(Array.from({ length: Math.min(concurrency, lanes.length) }, worker));
    return result;
  }

  function drainOnce(): Promise<DrainResult> {
    // One pass at a time: two passes could both pick up an entry and send it twice.
    if (draining !== null) {
      wakeAgain = true;
      return draining;
    }
    draining = drain().finally(() => {
      draining = null;
    });
    return draining;
  }

  function schedule(ms: number): void {
    if (!running) return;
    if (timer !== null) timers.clearTimeout(timer);
    timer = timers.setTimeout(() => {
      timer = null;
      void loop();
    }, ms);
  }

  async function loop(): Promise<void> {
    let again = false;
    try {
      const result = await drainOnce();
      // A full batch means more may be due right now.
      again = result.attempted >= BATCH || wakeAgain;
    } catch (error) {
      log.error({ err: error }, 'alert delivery could not read the outbox');
    }
    wakeAgain = false;
    schedule(again ? 0 : pollMs);
  }

  return {
    start() {
      if (running) return;
      running = true;
      schedule(0);
    },
    async stop() {
      running = false;
      if (timer !== null) timers.clearTimeout(timer);
      timer = null;
      if (draining !== null) await draining.catch(() => undefined);
    },
    wake() {
      if (draining !== null) wakeAgain = true;
      else schedule(0);
    },
    drainOnce,
  };
}
