/**
 * A small server-sent events client over a real socket (node:http), for tests: it parses the
 * stream as EventSource would and lets a test wait for events or comment lines.
 */
import { request } from 'node:http';
import type { ClientRequest, IncomingMessage } from 'node:http';

export interface SseEvent {
  id: string | null;
  event: string;
  data: string;
}

export interface SseClient {
  status: number;
  headers: IncomingMessage['headers'];
  events: SseEvent[];
  comments: string[];
  retry: number | null;
  /** Waits until `count` events have arrived in total. */
  waitForEvents(count: number, timeoutMs?: number): Promise<SseEvent[]>;
  /** Waits until the events so far satisfy `done`. */
  waitUntil(done: (events: readonly SseEvent[]) => boolean, timeoutMs?: number): Promise<void>;
  waitForComment(prefix: string, timeoutMs?: number): Promise<string>;
  /** Resolves when the server ends the stream. */
  ended: Promise<void>;
  close(): void;
}

export function openSse(url: string, headers: Record<string, string>): Promise<SseClient> {
  return new Promise((resolve, reject) => {
    let req: ClientRequest | undefined = undefined;
    req = request(url, { headers: { accept: 'text/event-stream', ...headers } }, (res) => {
      res.setEncoding('utf8');
      const events: SseEvent[] = [];
      const comments: string[] = [];
      const waiters = new Set<() => void>();
      let buffer = '';
      let endResolve: () => void = () => undefined;
      const ended = new Promise<void>((r) => {
        endResolve = r;
      });
      const client: SseClient = {
        status: res.statusCode ?? 0,
        headers: res.headers,
        events,
        comments,
        retry: null,
        ended,
        waitForEvents(count, timeoutMs = 5000) {
          return waitUntil(() => events.length >= count, timeoutMs, `${count} events`).then(() =>
            events.slice(0, count),
          );
        },
        waitUntil(done, timeoutMs = 5000) {
          return waitUntil(() => done(events), timeoutMs, 'the events awaited');
        },
        waitForComment(prefix, timeoutMs = 5000) {
          return waitUntil(
            () => comments.some((c) => c.startsWith(prefix)),
            timeoutMs,
            `a comment "${prefix}"`,
          ).then(() => comments.find((c) => c.startsWith(prefix)) ?? '');
        },
        close() {
          req?.destroy();
        },
      };
      function waitUntil(done: () => boolean, timeoutMs: number, what: string): Promise<void> {
        return new Promise((ok, fail) => {
          if (done()) {
            ok();
            return;
          }
          const timer = setTimeout(() => {
            waiters.delete(check);
            fail(new Error(`no ${what} within ${timeoutMs} ms; got ${JSON.stringify(events)}`));
          }, timeoutMs);
          const check = (): void => {
            if (!done()) return;
            clearTimeout(timer);
            waiters.delete(check);
            ok();
          };
          waiters.add(check);
        });
      }
      res.on('data', (chunk: string) => {
        buffer += chunk;
        let end = buffer.indexOf('\n\n');
        while (end !== -1) {
          const block = buffer.slice(0, end);
          buffer = buffer.slice(end + 2);
          const event: SseEvent = { id: null, event: 'message', data: '' };
          let hasField = false;
          for (const line of block.split('\n')) {
            if (line.startsWith(':')) {
              comments.push(line.slice(1).trim());
              continue;
            }
            const colon = line.indexOf(':');
            const field = colon === -1 ? line : line.slice(0, colon);
            const value = colon === -1 ? '' : line.slice(colon + 1).replace(/^ /, '');
            if (field === 'id') event.id = value;
            else if (field === 'event') event.event = value;
            else if (field === 'data')
              event.data = event.data === '' ? value : `${event.data}\n${value}`;
            else if (field === 'retry') client.retry = Number(value);
            else continue;
            if (field !== 'retry') hasField = true;
          }
          if (hasField) events.push(event);
          end = buffer.indexOf('\n\n');
        }
        for (const waiter of [...waiters]) waiter();
      });
      res.on('end', endResolve);
      res.on('close', endResolve);
      resolve(client);
    });
    req.on('error', reject);
    req.end();
  });
}
