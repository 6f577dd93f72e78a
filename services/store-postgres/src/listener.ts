import pg from 'pg';
import type { ClusterMessage } from '@trueshift/store';

const ALERT_CHANGES = new Set(['opened', 'repeated', 'acknowledged', 'cleared']);
const MARK_CHANGES = new Set(['created', 'corrected', 'withdrawn']);

function isWhole(value: unknown): value is number {
  return typeof value === 'number' && Number.isSafeInteger(value);
}

/**
 * A NOTIFY payload as a ClusterMessage, or null when it is not one. Anyone with access to the
 * database can notify the channel, so nothing about a payload is taken on trust.
 */
export function parseClusterMessage(payload: string | undefined): ClusterMessage | null {
  if (payload === undefined) return null;
  let parsed: unknown;
  try {
    parsed = JSON.parse(payload);
  } catch {
    return null;
  }
  if (typeof parsed !== 'object' || parsed === null) return null;
  const m = parsed as Record<string, unknown>;
  switch (m.kind) {
    case 'samples':
      return Array.isArray(m.shards) && m.shards.every(isWhole)
        ? { kind: 'samples', shards: m.shards }
        : null;
    case 'alert':
      return typeof m.origin === 'string' &&
        isWhole(m.alertId) &&
        typeof m.change === 'string' &&
        ALERT_CHANGES.has(m.change)
        ? {
            kind: 'alert',
            origin: m.origin,
            alertId: m.alertId,
            change: m.change as 'opened' | 'repeated' | 'acknowledged' | 'cleared',
          }
        : null;
    case 'evidence':
      return typeof m.origin === 'string' && isWhole(m.snapshotId)
        ? { kind: 'evidence', origin: m.origin, snapshotId: m.snapshotId }
        : null;
    case 'mark':
      return typeof m.origin === 'string' &&
        typeof m.markId === 'string' &&
        typeof m.change === 'string' &&
        MARK_CHANGES.has(m.change)
        ? {
            kind: 'mark',
            origin: m.origin,
            markId: m.markId,
            change: m.change as 'created' | 'corrected' | 'withdrawn',
          }
        : null;
    default:
      return null;
  }
}

export interface ListenerOptions {
  config: pg.ClientConfig;
  channel: string;
  listener: (message: ClusterMessage) => void;
  onGap: (() => void) | undefined;
  /** First wait before reconnecting; doubles up to `maxBackoffMs`. */
  backoffMs?: number;
  maxBackoffMs?: number;
}

/**
 * One LISTEN connection of its own (a pooled connection would be handed to other queries and its
 * LISTEN lost). When the connection drops it reconnects with capped back-off and reports the gap,
 * since messages sent meanwhile are gone.
 */
export class ClusterListener {
  private client: pg.Client | null = null;
  private closed = false;
  private reconnecting = false;
  private timer: NodeJS.Timeout | null = null;
  private wake: (() => void) | null = null;
  private readonly backoffMs: number;
  private readonly maxBackoffMs: number;

  constructor(private readonly options: ListenerOptions) {
    this.backoffMs = options.backoffMs ?? 100;
    this.maxBackoffMs = options.maxBackoffMs ?? 5000;
  }

  /** Connects and listens; rejects when the first connection cannot be made. */
  async start(): Promise<void> {
    this.client = await this.connect();
  }

  async close(): Promise<void> {
    this.closed = true;
    if (this.timer !== null) clearTimeout(this.timer);
    this.wake?.();
    const client = this.client;
    this.client = null;
    await client?.end().catch(() => undefined);
  }

  private async connect(): Promise<pg.Client> {
    const client = new pg.Client(this.options.config);
    // Without an 'error' listener a dropped connection would crash the process.
    client.on('error', () => {
      this.lost(client);
    });
    client.on('end', () => {
      this.lost(client);
    });
    client.on('notification', (notification) => {
      if (notification.channel !== this.options.channel) return;
      const message = parseClusterMessage(notification.payload);
      if (message === null) return;
      this.deliver(() => {
        this.options.listener(message);
      });
    });
    try {
      await client.connect();
      await client.query(`LISTEN "${this.options.channel}"`);
    } catch (error) {
      await client.end().catch(() => undefined);
      throw error;
    }
    return client;
  }

  /** A listener that throws must not take the connection's event handling down with it. */
  private deliver(call: () => void): void {
    try {
      call();
    } catch {
      // The listener's own failure is its business; the next message still goes out.
    }
  }

  /** Read through a call: close() may have run while this waited. */
  private isClosed(): boolean {
    return this.closed;
  }

  private lost(client: pg.Client): void {
    if (this.closed || this.reconnecting || client !== this.client) return;
    this.client = null;
    this.reconnecting = true;
    client.end().catch(() => undefined);
    void this.reconnect();
  }

  private async reconnect(): Promise<void> {
    let wait = this.backoffMs;
    while (!this.closed) {
      await new Promise<void>((resolve) => {
        this.wake = resolve;
        this.timer = setTimeout(resolve, wait);
      });
      this.timer = null;
      this.wake = null;
      if (this.isClosed()) break;
      try {
        const client = await this.connect();
        if (this.isClosed()) {
          await client.end().catch(() => undefined);
          break;
        }
        this.client = client;
        this.reconnecting = false;
        const { onGap } = this.options;
        if (onGap !== undefined) this.deliver(onGap);
        return;
      } catch {
        wait = Math.min(wait * 2, this.maxBackoffMs);
      }
    }
    this.reconnecting = false;
  }
}
