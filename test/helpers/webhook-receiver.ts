/**
 * A real webhook receiver on 127.0.0.1 (node:http) that answers each request with the status the
 * test chooses and records what arrived, so a test can see every attempt and every accepted one.
 */
import { createServer } from 'node:http';
import type { IncomingHttpHeaders, Server } from 'node:http';
import type { AddressInfo } from 'node:net';

export interface ReceivedRequest {
  method: string;
  headers: IncomingHttpHeaders;
  body: string;
  status: number;
}

export interface WebhookReceiver {
  url: string;
  port: number;
  requests: ReceivedRequest[];
  /** Requests answered with a 2xx: what the receiver actually took in. */
  accepted(): ReceivedRequest[];
  close(): Promise<void>;
}

export async function startReceiver(
  answer: (n: number, body: string) => number | { status: number; headers: Record<string, string> },
  port = 0,
): Promise<WebhookReceiver> {
  const requests: ReceivedRequest[] = [];
  const server: Server = createServer((req, res) => {
    let body = '';
    req.setEncoding('utf8');
    req.on('data', (chunk: string) => (body += chunk));
    req.on('end', () => {
      const reply = answer(requests.length + 1, body);
      const { status, headers } =
        typeof reply === 'number' ? { status: reply, headers: {} } : reply;
      requests.push({ method: req.method ?? '', headers: req.headers, body, status });
      res.writeHead(status, { 'content-type': 'text/plain', ...headers });
      res.end(status < 300 ? 'ok' : 'no');
    });
  });
  await new Promise<void>((resolve, reject) => {
    server.once('error', reject);
    server.listen(port, '127.0.0.1', () => {
      resolve();
    });
  });
  const bound = (server.address() as AddressInfo).port;
  return {
    url: `http://127.0.0.1:${bound}/hooks/alerts`,
    port: bound,
    requests,
    accepted: () => requests.filter((r) => r.status >= 200 && r.status < 300),
    close: () =>
      new Promise<void>((resolve) => {
        server.closeAllConnections();
        server.close(() => {
          resolve();
        });
      }),
  };
}
