/**
 * The server-sent event stream: every alert and evidence change gets the next number, and the
 * latest `ringSize` are kept in memory so a client that lost its connection can ask for what it
 * missed with Last-Event-ID. Older gaps, or ids from before a restart, get a `reload` event: the
 * client reads the state again instead of trusting a stream with a hole in it.
 */

export type StreamEventKind = 'alert' | 'evidence' | 'mark';

export interface StreamEvent {
  id: number;
  kind: StreamEventKind;
  at: number;
  data: unknown;
}

export interface StreamClient {
  /** Writes one chunk of the stream; false asks the hub to stop writing until it drains. */
  write(chunk: string): boolean;
  /** Too slow or gone: the hub drops it; the client resumes with Last-Event-ID. */
  end(): void;
  /** Bytes written but not yet sent. */
  backlog(): number;
}

export interface IntervalTimers {
  setInterval(callback: () => void, ms: number): unknown;
  clearInterval(handle: unknown): void;
}

export interface EventHubOptions {
  clock: () => number;
  timers: IntervalTimers;
  ringSize: number;
  heartbeatMs: number;
  /** A client with more than this many bytes unsent is cut off. */
  maxBacklogBytes: number;
}

export type ResumePlan =
  | { kind: 'fresh' }
  | { kind: 'replay'; events: StreamEvent[] }
  | { kind: 'reload'; reason: string };

export interface EventHub {
  publish(kind: StreamEventKind, data: unknown): StreamEvent;
  /** What a client resuming after `lastEventId` must be sent first. */
  resume(lastEventId: number | null): ResumePlan;
  attach(client: StreamClient, lastEventId: number | null): () => void;
  lastId(): number;
  clients(): number;
  closeAll(): void;
}

export function formatEvent(event: StreamEvent): string {
  // JSON.stringify never emits a raw newline, so the data always fits on one `data:` line.
  const data = JSON.stringify({ ...asRecord(event.data), publishedAt: event.at });
  return `id: ${event.id}\nevent: ${event.kind}\ndata: ${data}\n\n`;
}

function asRecord(data: unknown): Record<string, unknown> {
  return typeof data === 'object' && data !== null && !Array.isArray(data)
    ? (data as Record<string, unknown>)
    : { value: data };
}

export function createEventHub(options: EventHubOptions): EventHub {
  const { clock, timers, ringSize } = options;
  // Ids start at the clock, not at 1, so ids after a restart are larger than any a client kept
  // from before it, and an old id can never be mistaken for one of the new process's events.
  const firstId = Math.max(1, Math.floor(clock()));
  let nextId = firstId;
  const ring: StreamEvent[] = [];
  let ringStart = 0;
  const attached = new Set<StreamClient>();
  let heartbeat: unknown = null;

  const inRing = (): StreamEvent[] => ring.slice(ringStart).concat(ring.slice(0, ringStart));

  function send(client: StreamClient, chunk: string): void {
    if (client.backlog() > options.maxBacklogBytes) {
      attached.delete(client);
      client.end();
      return;
    }
    client.write(chunk);
  }

  function startHeartbeat(): void {
    if (heartbeat !== null) return;
    heartbeat = timers.setInterval(() => {
      // A comment line: proxies see traffic, EventSource ignores it.
      for (const client of [...attached]) send(client, `: heartbeat ${clock()}\n\n`);
    }, options.heartbeatMs);
  }

  function stopHeartbeatIfIdle(): void {
    if (attached.size > 0 || heartbeat === null) return;
    timers.clearInterval(heartbeat);
    heartbeat = null;
  }

  const hub: EventHub = {
    publish(kind, data) {
      const event: StreamEvent = { id: nextId, kind, at: clock(), data };
      nextId += 1;
      if (ring.length < ringSize) {
        ring.push(event);
      } else {
        ring[ringStart] = event;
        ringStart = (ringStart + 1) % ringSize;
      }
      const chunk = formatEvent(event);
      for (const client of [...attached]) send(client, chunk);
      return event;
    },

    resume(lastEventId) {
      if (lastEventId === null) return { kind: 'fresh' };
      const newest = nextId - 1;
      if (lastEventId === newest) return { kind: 'replay', events: [] };
      if (lastEventId > newest) {
        return { kind: 'reload', reason: `event ${lastEventId} is not from this server's stream` };
      }
      const events = inRing();
      const oldest = events[0]?.id ?? nextId;
      if (lastEventId < oldest - 1) {
        return {
          kind: 'reload',
          reason: `event ${lastEventId} is older than the ${events.length} events kept`,
        };
      }
      return { kind: 'replay', events: events.filter((e) => e.id > lastEventId) };
    },

    attach(client, lastEventId) {
      const plan = hub.resume(lastEventId);
      if (plan.kind === 'fresh') {
        // EventSource only remembers ids it was sent: without this a client that saw no event
        // before losing its connection could not resume and would miss what came meanwhile.
        client.write(
          `id: ${nextId - 1}\nevent: connected\ndata: ${JSON.stringify({ publishedAt: clock() })}\n\n`,
        );
      } else if (plan.kind === 'replay') {
        for (const event of plan.events) client.write(formatEvent(event));
      } else {
        // Carries the newest id, so the client's next resume starts from here.
        client.write(
          `id: ${nextId - 1}\nevent: reload\ndata: ${JSON.stringify({ reason: plan.reason, publishedAt: clock() })}\n\n`,
        );
      }
      attached.add(client);
      startHeartbeat();
      return () => {
        attached.delete(client);
        stopHeartbeatIfIdle();
      };
    },

    lastId: () => nextId - 1,
    clients: () => attached.size,

    closeAll() {
      for (const client of attached) client.end();
      attached.clear();
      stopHeartbeatIfIdle();
    },
  };
  return hub;
}
