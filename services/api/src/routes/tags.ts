import { Type } from '@sinclair/typebox';
import { resolveTagSettings } from '@trueshift/analyser';
import { CAUTION } from '@trueshift/config';
import { TrueshiftError } from '@trueshift/errors';
import type { TagRecord, TagSettings as StoredTagSettings } from '@trueshift/store';
import { decodeCursor, encodeCursor } from '../cursor.js';
import { analysisDefaults } from '../context.js';
import type { ApiApp, ApiContext } from '../context.js';
import { Caution, Limit, Mark, Snapshot, Tag, TagParams, TagPatch, errors } from '../schemas.js';
import { thinIndices } from '../thin.js';

export async function requireTag(ctx: ApiContext, name: string): Promise<TagRecord> {
  const tag = await ctx.store.getTag(name);
  if (tag === null) throw new TrueshiftError('TAG_NOT_FOUND', `Tag ${JSON.stringify(name)}.`);
  return tag;
}

const SamplesQuery = Type.Object(
  {
    from: Type.Optional(Type.Number({ description: 'Inclusive lower time bound (epoch ms)' })),
    to: Type.Optional(Type.Number({ description: 'Exclusive upper time bound (epoch ms)' })),
    limit: Limit(1000, 10_000),
    cursor: Type.Optional(Type.String({ maxLength: 200 })),
    thin: Type.Optional(
      Type.Integer({
        minimum: 2,
        maximum: 20_000,
        description:
          'Return at most this many samples for a plot: the lowest and highest of each time bucket over the whole range. No paging.',
      }),
    ),
    goodOnly: Type.Boolean({ default: false }),
  },
  { additionalProperties: false },
);

const SampleColumns = Type.Object({
  t: Type.Array(Type.Number()),
  value: Type.Array(Type.Union([Type.Number(), Type.Null()])),
  quality: Type.Array(Type.Integer()),
});

export function tagRoutes(app: ApiApp, ctx: ApiContext): void {
  const { store, clock } = ctx;

  app.get(
    '/tags',
    {
      config: { scope: 'read' },
      schema: {
        summary: 'All tags, by name',
        tags: ['tags'],
        response: { 200: Type.Object({ tags: Type.Array(Tag) }), ...errors(401, 403) },
      },
    },
    async () => ({ tags: await store.listTags() }),
  );

  app.get(
    '/tags/:name',
    {
      config: { scope: 'read' },
      schema: {
        summary: 'One tag with its settings',
        description: 'Tag names that contain "/" are sent with it encoded as %2F.',
        tags: ['tags'],
        params: TagParams,
        response: { 200: Tag, ...errors(401, 403, 404) },
      },
    },
    async (request) => requireTag(ctx, request.params.name),
  );

  app.patch(
    '/tags/:name',
    {
      config: { scope: 'write' },
      schema: {
        summary: "Change a tag's unit, description, valid range or analysis settings",
        description:
          'Fields left out stay as they are; a setting given as null goes back to the default.',
        tags: ['tags'],
        params: TagParams,
        body: TagPatch,
        response: { 200: Tag, ...errors(400, 401, 403, 404, 413, 429) },
      },
    },
    async (request) => {
      const tag = await requireTag(ctx, request.params.name);
      const patch = request.body;
      const settings: Record<string, unknown> = { ...tag.settings };
      for (const [key, value] of Object.entries(patch.settings ?? {})) {
        if (value === null) Reflect.deleteProperty(settings, key);
        else settings[key] = value;
      }
      const merged = settings as StoredTagSettings;
      try {
        resolveTagSettings(merged, analysisDefaults(ctx.config));
      } catch (error) {
        if (error instanceof RangeError) throw new TrueshiftError('REQUEST_INVALID', error.message);
        throw error;
      }
      const validMin = patch.validMin === undefined ? tag.validMin : patch.validMin;
      const validMax = patch.validMax === undefined ? tag.validMax : patch.validMax;
      if (validMin !== null && validMax !== null && !(validMin < validMax)) {
        throw new TrueshiftError(
          'REQUEST_INVALID',
          `validMin (${validMin}) must be below validMax (${validMax}).`,
        );
      }
      return store.upsertTag(
        {
          name: tag.name,
          unit: patch.unit === undefined ? tag.unit : patch.unit,
          description: patch.description === undefined ? tag.description : patch.description,
          better: patch.better ?? tag.better,
          validMin,
          validMax,
          settings: merged,
        },
        clock(),
      );
    },
  );

  app.get(
    '/tags/:name/samples',
    {
      config: { scope: 'read' },
      schema: {
        summary: "A tag's samples in a time range, paged or thinned for a plot",
        description:
          'The first page holds the latest `limit` samples of the range, oldest first; `next` is the cursor of the page before it, null on the last. With `thin`, the whole range is thinned instead and there is no paging.',
        tags: ['tags'],
        params: TagParams,
        querystring: SamplesQuery,
        response: {
          200: Type.Object({
            tag: Type.String(),
            thinned: Type.Boolean(),
            /** Samples in the range before thinning; only with thin. */
            total: Type.Union([Type.Integer(), Type.Null()]),
            samples: SampleColumns,
            next: Type.Union([Type.String(), Type.Null()]),
          }),
          ...errors(400, 401, 403, 404),
        },
      },
    },
    async (request) => {
      const { name } = request.params;
      const q = request.query;
      await requireTag(ctx, name);
      if (q.thin !== undefined && q.cursor !== undefined) {
        throw new TrueshiftError('REQUEST_INVALID', 'thin and cursor do not go together.');
      }
      const to = q.cursor === undefined ? q.to : decodeCursor(`samples:${name}`, q.cursor);
      const range = {
        ...(q.from === undefined ? {} : { from: q.from }),
        ...(to === undefined ? {} : { to }),
        goodOnly: q.goodOnly,
      };
      if (q.thin !== undefined) {
        const all = await store.readSamples(name, range);
        const keep = thinIndices(all, q.thin);
        return {
          tag: name,
          thinned: true,
          total: all.t.length,
          samples: {
            t: keep.map((i) => all.t[i] ?? 0),
            value: keep.map((i) => valueOrNull(all.value[i])),
            quality: keep.map((i) => all.quality[i] ?? 0),
          },
          next: null,
        };
      }
      // One more than asked, to know whether an older page exists without a second query.
      const page = await store.readSamples(name, { ...range, limit: q.limit + 1 });
      const more = page.t.length > q.limit;
      const start = more ? 1 : 0;
      const t = Array.from(page.t.subarray(start));
      return {
        tag: name,
        thinned: false,
        total: null,
        samples: {
          t,
          value: Array.from(page.value.subarray(start), valueOrNull),
          quality: Array.from(page.quality.subarray(start)),
        },
        next: more && t.length > 0 ? encodeCursor(`samples:${name}`, t[0] ?? 0) : null,
      };
    },
  );

  app.get(
    '/tags/:name/evidence',
    {
      config: { scope: 'read' },
      schema: {
        summary: 'The current evidence on a tag: the latest of each live mark on it',
        tags: ['evidence'],
        params: TagParams,
        response: {
          200: Type.Object({
            caution: Caution,
            tag: Type.String(),
            marks: Type.Array(
              Type.Object({ mark: Mark, evidence: Type.Union([Snapshot, Type.Null()]) }),
            ),
          }),
          ...errors(401, 403, 404),
        },
      },
    },
    async (request) => {
      const { name } = request.params;
      await requireTag(ctx, name);
      const marks = await store.listMarks({ tag: name, includeWithdrawn: false });
      const latest = await Promise.all(marks.map((mark) => store.latestEvidence(mark.id, name)));
      return {
        caution: CAUTION,
        tag: name,
        marks: marks.map((mark, i) => ({ mark, evidence: latest[i] ?? null })),
      };
    },
  );
}

function valueOrNull(x: number | undefined): number | null {
  return x === undefined || Number.isNaN(x) ? null : x;
}
