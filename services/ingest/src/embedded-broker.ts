import { once } from 'node:events';
import { createServer, type Socket } from 'node:net';
import { Aedes } from 'aedes';

export interface EmbeddedBrokerOptions {
  /** 127.0.0.1 by default: the embedded broker is for this machine, not the plant network. */
  host?: string;
  /** 0 (the default) picks a free port; `port` then tells which. */
  port?: number;
}

export interface EmbeddedBroker {
  url: string;
  port: number;
  close(): Promise<void>;
}

/**
 * An MQTT broker inside the process (aedes, MQTT 3.1.1, sessions kept in memory), used when no broker
 * URL is configured so that a fresh machine runs with no other server. Connect to it with
 * protocolVersion 4: aedes does not speak MQTT 5. Its sessions do not survive a restart of the
 * process, which a plant's own broker does.
 */
export async function startEmbeddedBroker(
  options: EmbeddedBrokerOptions = {},
): Promise<EmbeddedBroker> {
  const host = options.host ?? '127.0.0.1';
  const broker = await Aedes.createBroker();
  const sockets = new Set<Socket>();
  const server = createServer((socket) => {
    sockets.add(socket);
    socket.once('close', () => sockets.delete(socket));
    broker.handle(socket);
  });
  server.listen(options.port ?? 0, host);
  try {
    await once(server, 'listening');
  } catch (error) {
    broker.close();
    throw error;
  }
  const address = server.address();
  const port = typeof address === 'object' && address !== null ? address.port : 0;
  let closing: Promise<void> | null = null;
  return {
    url: `mqtt://${host.includes(':') ? `[${host}]` : host}:${port}`,
    port,
    close() {
      closing ??= (async () => {
        const serverClosed = new Promise<void>((resolve) => {
          server.close(() => {
            resolve();
          });
        });
        await new Promise<void>((resolve) => {
          broker.close(() => {
            resolve();
          });
        });
        // aedes ends its clients' sessions; sockets a client has not closed yet are cut here.
        for (const socket of sockets) socket.destroy();
        await serverClosed;
      })();
      return closing;
    },
  };
}
