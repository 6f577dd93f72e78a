/**
 * Reads what one mark's figures need from the store: the same in-control history the analyser
 * judged against, the analysed values after the mark, the raw samples around it for the run chart,
 * and the path of the risk. The drawing itself is pure (@trueshift/report).
 */

import {
  basisOf,
  inControlHistory,
  markSettings,
  periodMeans,
  resolveTagSettings,
  settlingWindows,
} from '@trueshift/analyser';
import { thinIndices } from '@trueshift/api';
import { TrueshiftError } from '@trueshift/errors';
import { buildFigures, readEvidence } from '@trueshift/report';
import type { Figures } from '@trueshift/report';
import { windowDifferences } from '@trueshift/stats';
import type { MarkRecord, Store } from '@trueshift/store';

/** Samples drawn in the run chart at most; more are thinned to each time bucket's low and high. */
export const RUN_POINTS = 1500;
/** Evaluations drawn in the risk path at most (the newest). */
const PATH_LIMIT = 10_000;

function requireCovers(mark: MarkRecord, tag: string): void {
  if (!mark.tags.includes(tag)) {
    throw new TrueshiftError(
      'EVIDENCE_NOT_FOUND',
      `Mark ${mark.id} does not cover tag ${JSON.stringify(tag)}.`,
    );
  }
}

export async function loadFigures(store: Store, markId: string, tag: string): Promise<Figures> {
  const mark = await store.getMark(markId);
  if (mark === null) throw new TrueshiftError('MARK_NOT_FOUND', `Mark ${JSON.stringify(markId)}.`);
  requireCovers(mark, tag);
  const tagRecord = await store.getTag(tag);
  if (tagRecord === null) throw new TrueshiftError('TAG_NOT_FOUND', `Tag ${JSON.stringify(tag)}.`);
  const snapshot = await store.latestEvidence(mark.id, tag);
  if (snapshot === null) {
    throw new TrueshiftError(
      'EVIDENCE_NOT_FOUND',
      `Mark ${mark.id} has no evaluation on ${JSON.stringify(tag)} yet: no sample after it has been analysed.`,
    );
  }
  // Only the kind and the period matter here, and the service's defaults never set those.
  const settings = markSettings(mark, resolveTagSettings(tagRecord.settings));
  const continuous = settings.kind === 'continuous';
  const [before, marks, afterRaw, path] = await Promise.all([
    store.readSamples(tag, { to: mark.at, goodOnly: true }),
    store.listMarks({ tag }),
    store.readSamples(tag, {
      from: mark.at,
      to: snapshot.sampleTime + (continuous ? settings.periodMs : 1),
      goodOnly: true,
    }),
    store.listEvidenceSnapshots(mark.id, tag, { limit: PATH_LIMIT }),
  ]);
  const history = inControlHistory(before.t, before.value, {
    markAt: mark.at,
    windows: settlingWindows(marks, tag, mark.at, mark.id),
    kind: settings.kind,
    periodMs: settings.periodMs,
  });
  const evidence = readEvidence(snapshot.body);
  const nAfter = evidence?.nAfter ?? snapshot.nAfter;
  const nBefore = Math.max(
    1,
    Math.min(evidence?.nBefore ?? settings.nBefore, Math.max(1, history.length)),
  );
  const differences =
    history.length >= 1 && nAfter >= 1
      ? windowDifferences(history, nBefore, nAfter)
      : new Float64Array(0);

  const after = continuous
    ? (() => {
        const means = periodMeans(afterRaw.t, afterRaw.value, settings.periodMs, mark.at);
        return { t: means.start, value: means.mean };
      })()
    : { t: afterRaw.t, value: afterRaw.value };

  // Where the before-window's mean line starts: the nBefore-th good sample before the mark. A
  // settling window of an earlier mark inside it would make the line a little long, never wrong.
  const beforeStart = continuous
    ? mark.at - nBefore * settings.periodMs
    : (before.t[Math.max(0, before.t.length - nBefore)] ?? null);
  const span = Math.max(snapshot.sampleTime - mark.at, mark.at - (beforeStart ?? mark.at));
  const runFrom = Math.min(beforeStart ?? mark.at, mark.at - span) - Math.round(span * 0.25);
  const all = await store.readSamples(tag, {
    from: runFrom,
    to: snapshot.sampleTime + (continuous ? settings.periodMs : 1),
    goodOnly: true,
  });
  const keep = thinIndices(all, RUN_POINTS);

  return buildFigures(
    {
      tag: { name: tagRecord.name, unit: tagRecord.unit, description: tagRecord.description },
      mark: {
        id: mark.id,
        at: mark.at,
        label: mark.label,
        note: mark.note,
        direction: mark.direction,
      },
      basis: basisOf(settings.kind, settings.periodMs),
      snapshot,
      run: {
        t: keep.map((i) => all.t[i] ?? Number.NaN),
        value: keep.map((i) => all.value[i] ?? Number.NaN),
        total: all.t.length,
        thinned: keep.length < all.t.length,
      },
      history,
      beforeStart,
      after,
      path,
      smallestShift: settings.smallestShift,
    },
    differences,
  );
}
