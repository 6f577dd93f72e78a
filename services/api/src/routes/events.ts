import { Type } from '@sinclair/typebox';
import type { ApiApp, ApiContext } from '../context.js';
import { errors } from '../schemas.js';

/** The id a client resumes after; anything unreadable counts as too old, which asks for a reload. */
function resumeId(header: string | string[] | undefined, query: string | undefined): number | null {
  const text = (Array.isArray(header) ? header[0] : header) ?? query;
  if (text === undefined || text.trim() === '') return null;
  return /^\d{1,15}$/.test(text.trim()) ? Number(text.trim()) : 0;
}

export function eventRoutes(app: ApiApp, ctx: ApiContext, retryMs: number): void {
  app.get(
    '/events',
    {
      config: { scope: 'read' },
      schema: {
        summary: 'Server-sent events: alert, evidence and mark changes',
        description:
          'Each event has an increasing numeric id. Reconnect with the Last-Event-ID header (or ?lastEventId=) to get what was missed; when that is no longer kept, a `reload` event says to read the state again. Comment lines every few seconds keep proxies from closing the stream.',
        tags: ['events'],
        querystring: Type.Object(
          { lastEventId: Type.Optional(Type.String({ maxLength: 32 })) },
          { additionalProperties: false },
        ),
        response: {
          200: Type.String({ description: 'text/event-stream' }),
          ...errors(400, 401, 403),
        },
      },
    },
    (request, reply) => {
      const lastEventId = resumeId(request.headers['last-event-id'], request.query.lastEventId);
      // The stream outlives the request cycle, so Fastify hands the socket over.
      reply.hijack();
      const res = reply.raw;
      res.writeHead(200, {
        'content-type': 'text/event-stream; charset=utf-8',
        'cache-control': 'no-cache, no-transform',
        connection: 'keep-alive',
        // nginx buffers responses by default, which would hold events back.
        'x-accel-buffering': 'no',
      });
      res.write(`retry: ${retryMs}\n\n`);
      const detach = ctx.hub.attach(
        {
          write: (chunk) => res.write(chunk),
          end: () => {
            res.end();
          },
          backlog: () => res.writableLength,
        },
        lastEventId,
      );
      res.on('close', detach);
    },
  );
}
