import { Type } from '@sinclair/typebox';
import type { Static } from '@sinclair/typebox';
import {
  basisOf,
  inControlHistory,
  markSettings,
  resolveTagSettings,
  settlingWindows,
} from '@trueshift/analyser';
import type { MarkSettings, SettlingWindow } from '@trueshift/analyser';
import { CAUTION } from '@trueshift/config';
import { TrueshiftError } from '@trueshift/errors';
import { dotPlotData, windowDifferences } from '@trueshift/stats';
import type { EvidenceSnapshot, MarkRecord } from '@trueshift/store';
import { analysisDefaults } from '../context.js';
import type { ApiApp, ApiContext } from '../context.js';
import { lruCache } from '../lru-cache.js';
import { Caution, Limit, MarkTagParams, Snapshot, errors } from '../schemas.js';
import { requireMark } from './marks.js';
import { requireTag } from './tags.js';

function requireCovers(mark: MarkRecord, tag: string): void {
  if (!mark.tags.includes(tag)) {
    throw new TrueshiftError(
      'EVIDENCE_NOT_FOUND',
      `Mark ${mark.id} does not cover tag ${JSON.stringify(tag)}.`,
    );
  }
}

function numberIn(body: unknown, key: string): number | null {
  if (typeof body !== 'object' || body === null) return null;
  const value = (body as Record<string, unknown>)[key];
  return typeof value === 'number' && Number.isFinite(value) ? value : null;
}

/**
 * A field of the evidence inside a snapshot body: the analyser may store the evidence itself or
 * wrap it with the evaluation around it, so both are looked at.
 */
function evidenceNumber(snapshot: EvidenceSnapshot, key: string): number | null {
  const body = snapshot.body;
  const direct = numberIn(body, key);
  if (direct !== null) return direct;
  const inner =
    typeof body === 'object' && body !== null
      ? (body as Record<string, unknown>).evidence
      : undefined;
  return numberIn(inner, key);
}

const DotPlot = Type.Union([
  Type.Object({ kind: Type.Literal('points'), values: Type.Array(Type.Number()) }),
  Type.Object({
    kind: Type.Literal('bins'),
    lower: Type.Number(),
    width: Type.Number(),
    counts: Type.Array(Type.Integer()),
    total: Type.Integer(),
  }),
]);

const Reference = Type.Object({
  caution: Caution,
  markId: Type.String(),
  tag: Type.String(),
  basis: Type.String(),
  nHistory: Type.Integer(),
  nBefore: Type.Integer(),
  nAfter: Type.Integer(),
  differences: Type.Integer(),
  observedShift: Type.Union([Type.Number(), Type.Null()]),
  risk: Type.Union([Type.Number(), Type.Null()]),
  riskLevel: Type.Number(),
  direction: Type.String(),
  dotPlot: DotPlot,
});
type ReferenceAnswer = Static<typeof Reference>;

/**
 * Reference answers kept: each is a few kilobytes (at most maxPoints numbers), while building one
 * reads the tag's whole history before the mark, about 1.5 s for 10^6 samples.
 */
const REFERENCE_CACHE_ENTRIES = 32;

export function evidenceRoutes(app: ApiApp, ctx: ApiContext): void {
  const { store } = ctx;
  /**
   * Keyed by what the answer is built from: the latest evidence snapshot (the answer is the one
   * behind that evaluation, so samples back-filled since show with the next evaluation, as in the
   * evidence itself), the mark's revision (a correction), the settling windows of the other marks,
   * the tag's resolved settings and the query. A promise is kept, so requests arriving while the
   * first is still reading share its work.
   */
  const references = lruCache<string, Promise<ReferenceAnswer>>(REFERENCE_CACHE_ENTRIES);

  async function buildReference(
    mark: MarkRecord,
    snapshot: EvidenceSnapshot,
    tag: string,
    settings: MarkSettings,
    windows: readonly SettlingWindow[],
    plot: { maxPoints: number; bins: number },
  ): Promise<ReferenceAnswer> {
    // The same history the analyser judged against: good samples before the mark, less the
    // settling periods of earlier marks on the tag, as period means for continuous tags.
    const columns = await store.readSamples(tag, { to: mark.at, goodOnly: true });
    const history = inControlHistory(columns.t, columns.value, {
      markAt: mark.at,
      windows,
      kind: settings.kind,
      periodMs: settings.periodMs,
    });
    const nAfter = evidenceNumber(snapshot, 'nAfter') ?? snapshot.nAfter;
    const nBefore = Math.max(
      1,
      Math.min(evidenceNumber(snapshot, 'nBefore') ?? settings.nBefore, history.length),
    );
    const differences =
      history.length >= 1 && nAfter >= 1
        ? windowDifferences(history, nBefore, nAfter)
        : new Float64Array(0);
    return {
      caution: CAUTION,
      markId: mark.id,
      tag,
      basis: basisOf(settings.kind, settings.periodMs),
      nHistory: history.length,
      nBefore,
      nAfter,
      differences: differences.length,
      observedShift: evidenceNumber(snapshot, 'observedShift'),
      risk: snapshot.risk,
      riskLevel: evidenceNumber(snapshot, 'riskLevel') ?? settings.riskLevel,
      direction: mark.direction,
      dotPlot: dotPlotData(differences, plot),
    };
  }

  async function latestFor(
    id: string,
    tag: string,
  ): Promise<{ mark: MarkRecord; snapshot: EvidenceSnapshot }> {
    const mark = await requireMark(ctx, id);
    requireCovers(mark, tag);
    const snapshot = await store.latestEvidence(mark.id, tag);
    if (snapshot === null) {
      throw new TrueshiftError(
        'EVIDENCE_NOT_FOUND',
        `Mark ${mark.id} has no evaluation on ${JSON.stringify(tag)} yet: no sample after it has been analysed.`,
      );
    }
    return { mark, snapshot };
  }

  app.get(
    '/marks/:id/evidence/:tag',
    {
      config: { scope: 'read' },
      schema: {
        summary: 'The latest evidence of a mark on one of its tags',
        tags: ['evidence'],
        params: MarkTagParams,
        response: {
          200: Type.Object({ caution: Caution, evidence: Snapshot }),
          ...errors(401, 403, 404),
        },
      },
    },
    async (request) => {
      const { snapshot } = await latestFor(request.params.id, request.params.tag);
      return { caution: CAUTION, evidence: snapshot };
    },
  );

  app.get(
    '/marks/:id/evidence/:tag/path',
    {
      config: { scope: 'read' },
      schema: {
        summary: "The risk's path since the mark, one point per evaluation",
        tags: ['evidence'],
        params: MarkTagParams,
        querystring: Type.Object({ limit: Limit(1000, 10_000) }, { additionalProperties: false }),
        response: {
          200: Type.Object({
            caution: Caution,
            markId: Type.String(),
            tag: Type.String(),
            points: Type.Array(
              Type.Object({
                evaluatedAt: Type.Number(),
                sampleTime: Type.Number(),
                nAfter: Type.Integer(),
                risk: Type.Union([Type.Number(), Type.Null()]),
                verdict: Type.String(),
              }),
            ),
          }),
          ...errors(400, 401, 403, 404),
        },
      },
    },
    async (request) => {
      const mark = await requireMark(ctx, request.params.id);
      requireCovers(mark, request.params.tag);
      const snapshots = await store.listEvidenceSnapshots(mark.id, request.params.tag, {
        limit: request.query.limit,
      });
      return {
        caution: CAUTION,
        markId: mark.id,
        tag: request.params.tag,
        points: snapshots.map((s) => ({
          evaluatedAt: s.evaluatedAt,
          sampleTime: s.sampleTime,
          nAfter: s.nAfter,
          risk: s.risk,
          verdict: s.verdict,
        })),
      };
    },
  );

  app.get(
    '/marks/:id/evidence/:tag/reference',
    {
      config: { scope: 'read' },
      schema: {
        summary: 'The reference distribution behind the latest evidence, for a dot plot',
        description:
          "Every difference between an nAfter-sample mean and the nBefore samples before it in the tag's in-control history before the mark, as points or, when there are many, as bins.",
        tags: ['evidence'],
        params: MarkTagParams,
        querystring: Type.Object(
          {
            maxPoints: Type.Integer({ minimum: 0, maximum: 20_000, default: 2000 }),
            bins: Type.Integer({ minimum: 1, maximum: 2000, default: 200 }),
          },
          { additionalProperties: false },
        ),
        response: {
          200: Reference,
          ...errors(400, 401, 403, 404),
        },
      },
    },
    async (request) => {
      const { tag } = request.params;
      const { maxPoints, bins } = request.query;
      const { mark, snapshot } = await latestFor(request.params.id, tag);
      const tagRecord = await requireTag(ctx, tag);
      const settings = markSettings(
        mark,
        resolveTagSettings(tagRecord.settings, analysisDefaults(ctx.config)),
      );
      // Another mark before this one changes the history through its settling window, whether or
      // not the analyser has judged again since; reading the marks is cheap, the samples are not.
      const windows = settlingWindows(await store.listMarks({ tag }), tag, mark.at, mark.id);
      const key = JSON.stringify([
        mark.id,
        mark.revision,
        tag,
        snapshot.id,
        windows,
        settings.kind,
        settings.periodMs,
        settings.nBefore,
        settings.riskLevel,
        maxPoints,
        bins,
      ]);
      let answer = references.get(key);
      if (answer === undefined) {
        answer = buildReference(mark, snapshot, tag, settings, windows, { maxPoints, bins });
        references.set(key, answer);
        // A failed read is not an answer: the next request tries again.
        answer.catch(() => {
          if (references.get(key) === answer) references.delete(key);
        });
      }
      return answer;
    },
  );
}
