import { Type } from '@sinclair/typebox';
import { TrueshiftError } from '@trueshift/errors';
import { tagNameProblem } from '@trueshift/formats';
import type { MarkInput, MarkRecord } from '@trueshift/store';
import { actorOf } from '../access.js';
import type { ApiApp, ApiContext } from '../context.js';
import {
  Mark,
  MarkCorrect,
  MarkCreate,
  MarkIdParams,
  MarkRevision,
  ReasonBody,
  TagName,
  errors,
} from '../schemas.js';

async function requireKnownTags(ctx: ApiContext, tags: readonly string[]): Promise<void> {
  for (const tag of tags) {
    const problem = tagNameProblem(tag);
    if (problem !== null) throw new TrueshiftError('TAG_NAME_INVALID', problem);
  }
  // A mark on a misspelt tag would wait for samples that never come, so only known tags are taken.
  const found = await Promise.all(tags.map((tag) => ctx.store.getTag(tag)));
  const unknown = tags.filter((_, i) => found[i] === null);
  if (unknown.length > 0) {
    throw new TrueshiftError(
      'TAG_NOT_FOUND',
      `No samples were ever stored for ${unknown.map((t) => JSON.stringify(t)).join(', ')}.`,
    );
  }
}

export async function requireMark(ctx: ApiContext, id: string): Promise<MarkRecord> {
  const mark = await ctx.store.getMark(id);
  if (mark === null) throw new TrueshiftError('MARK_NOT_FOUND', `Mark ${JSON.stringify(id)}.`);
  return mark;
}

export function markRoutes(app: ApiApp, ctx: ApiContext): void {
  const { store, clock, hub } = ctx;

  app.get(
    '/marks',
    {
      config: { scope: 'read' },
      schema: {
        summary: 'Marks, newest change first; withdrawn ones only when asked for',
        tags: ['marks'],
        querystring: Type.Object(
          {
            tag: Type.Optional(TagName),
            includeWithdrawn: Type.Boolean({ default: false }),
          },
          { additionalProperties: false },
        ),
        response: { 200: Type.Object({ marks: Type.Array(Mark) }), ...errors(400, 401, 403) },
      },
    },
    async (request) => ({
      marks: await store.listMarks({
        ...(request.query.tag === undefined ? {} : { tag: request.query.tag }),
        includeWithdrawn: request.query.includeWithdrawn,
      }),
    }),
  );

  app.post(
    '/marks',
    {
      config: { scope: 'write' },
      schema: {
        summary: 'Mark a plant change on one or more tags',
        tags: ['marks'],
        body: MarkCreate,
        response: { 201: Mark, ...errors(400, 401, 403, 404, 413, 429) },
      },
    },
    async (request, reply) => {
      const body = request.body;
      await requireKnownTags(ctx, body.tags);
      const input: MarkInput = { ...body };
      const mark = await store.createMark(input, actorOf(request.caller), clock());
      hub.publish('mark', { change: 'created', mark });
      return reply.code(201).send(mark);
    },
  );

  app.get(
    '/marks/:id',
    {
      config: { scope: 'read' },
      schema: {
        summary: 'One mark with every revision it went through',
        tags: ['marks'],
        params: MarkIdParams,
        response: {
          200: Type.Object({ mark: Mark, revisions: Type.Array(MarkRevision) }),
          ...errors(401, 403, 404),
        },
      },
    },
    async (request) => {
      const mark = await requireMark(ctx, request.params.id);
      return { mark, revisions: await store.markHistory(mark.id) };
    },
  );

  app.patch(
    '/marks/:id',
    {
      config: { scope: 'write' },
      schema: {
        summary: 'Correct a mark, saying why; the earlier version stays in its history',
        tags: ['marks'],
        params: MarkIdParams,
        body: MarkCorrect,
        response: { 200: Mark, ...errors(400, 401, 403, 404, 409, 413, 429) },
      },
    },
    async (request) => {
      const { reason, ...patch } = request.body;
      if (patch.tags !== undefined) await requireKnownTags(ctx, patch.tags);
      const mark = await store.correctMark(
        request.params.id,
        patch,
        actorOf(request.caller),
        reason,
        clock(),
      );
      hub.publish('mark', { change: 'corrected', mark });
      return mark;
    },
  );

  app.post(
    '/marks/:id/withdraw',
    {
      config: { scope: 'write' },
      schema: {
        summary: 'Withdraw a mark, saying why; it stays on record',
        tags: ['marks'],
        params: MarkIdParams,
        body: ReasonBody,
        response: { 200: Mark, ...errors(400, 401, 403, 404, 409, 413, 429) },
      },
    },
    async (request) => {
      const mark = await store.withdrawMark(
        request.params.id,
        actorOf(request.caller),
        request.body.reason,
        clock(),
      );
      hub.publish('mark', { change: 'withdrawn', mark });
      return mark;
    },
  );
}
