import { Type } from '@sinclair/typebox';
import { decodeCursor, encodeCursor } from '../cursor.js';
import type { ApiApp, ApiContext } from '../context.js';
import { Limit, OutboxEntry, OutboxQuery, QuarantineEntry, errors } from '../schemas.js';

export function quarantineRoutes(app: ApiApp, ctx: ApiContext): void {
  const { store } = ctx;

  app.get(
    '/quarantine',
    {
      config: { scope: 'read' },
      schema: {
        summary: 'Refused input with the reason for each, newest first, paged',
        tags: ['quarantine'],
        querystring: Type.Object(
          {
            limit: Limit(100, 1000),
            cursor: Type.Optional(Type.String({ maxLength: 200 })),
            source: Type.Optional(Type.String({ minLength: 1, maxLength: 1000 })),
          },
          { additionalProperties: false },
        ),
        response: {
          200: Type.Object({
            entries: Type.Array(QuarantineEntry),
            next: Type.Union([Type.String(), Type.Null()]),
          }),
          ...errors(400, 401, 403),
        },
      },
    },
    async (request) => {
      const q = request.query;
      const entries = await store.listQuarantine({
        limit: q.limit + 1,
        ...(q.cursor === undefined ? {} : { beforeId: decodeCursor('quarantine', q.cursor) }),
        ...(q.source === undefined ? {} : { source: q.source }),
      });
      const more = entries.length > q.limit;
      const page = more ? entries.slice(0, q.limit) : entries;
      const last = page[page.length - 1];
      return {
        entries: page,
        next: more && last !== undefined ? encodeCursor('quarantine', last.id) : null,
      };
    },
  );

  app.get(
    '/outbox',
    {
      // Admin only: targets are webhook URLs, which often carry a secret in their path or query.
      config: { scope: 'admin' },
      schema: {
        summary: 'Alert deliveries, newest first: pending, delivered or dead',
        tags: ['admin'],
        querystring: OutboxQuery,
        response: {
          200: Type.Object({ entries: Type.Array(OutboxEntry) }),
          ...errors(400, 401, 403),
        },
      },
    },
    async (request) => ({
      entries: await store.listOutbox({
        ...(request.query.state === undefined ? {} : { state: request.query.state }),
        limit: request.query.limit,
      }),
    }),
  );
}
