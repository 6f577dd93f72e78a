/**
 * Alerts from analyser events. The dedupe key decides what counts as "the same alert": the store
 * folds a repeat with the key of an uncleared alert into it, so reprocessing a sample after a crash
 * repeats an alert instead of opening a second one.
 */

import type { AlertInput } from '@trueshift/store';
import type { DataQualityEvent, OutOfRangeEvent } from './data-quality.js';
import type { MarkEvaluation } from './mark-evaluation.js';
import type { UnmarkedShift } from './watch.js';

export const dedupeKeys = {
  credible: (markId: string, tag: string): string => `credible:${markId}:${tag}`,
  unmarked: (tag: string, number: number): string => `unmarked:${tag}:${number}`,
  stale: (tag: string): string => `stale:${tag}`,
  stuck: (tag: string): string => `stuck:${tag}`,
  outOfRange: (tag: string): string => `out-of-range:${tag}`,
} as const;

function fmt(x: number): string {
  return Number.isFinite(x) ? Number(x.toPrecision(4)).toString() : String(x);
}

function iso(t: number): string {
  return Number.isFinite(t) ? new Date(t).toISOString() : String(t);
}

/** The alert for an evaluation that opened one; it carries the evidence snapshot. */
export function credibleShiftAlert(
  evaluation: MarkEvaluation,
  label: string,
  snapshot: { id: number; body: unknown },
): AlertInput {
  const shift = evaluation.evidence?.observedShift ?? Number.NaN;
  const reference = evaluation.evidence?.reference;
  // No historical difference as large only bounds the risk: below one in M.
  const risk =
    reference?.status === 'ok' && reference.countAtLeast === 0
      ? `risk below ${fmt(100 / reference.m)}%`
      : evaluation.risk === null
        ? 'risk n/a'
        : `risk ${fmt(evaluation.risk * 100)}%`;
  return {
    tag: evaluation.tag,
    markId: evaluation.markId,
    kind: 'credible-shift',
    dedupeKey: dedupeKeys.credible(evaluation.markId, evaluation.tag),
    title: `${evaluation.tag}: credible ${shift >= 0 ? 'rise' : 'fall'} of ${fmt(shift)} after "${label}" (${risk})`,
    at: evaluation.sampleTime,
    evidence: { snapshotId: snapshot.id, ...asObject(snapshot.body) },
  };
}

function asObject(body: unknown): Record<string, unknown> {
  return typeof body === 'object' && body !== null && !Array.isArray(body)
    ? (body as Record<string, unknown>)
    : { body };
}

export function unmarkedShiftAlert(tag: string, event: UnmarkedShift): AlertInput {
  return {
    tag,
    markId: null,
    kind: 'unmarked-shift',
    dedupeKey: dedupeKeys.unmarked(tag, event.number),
    title: `${tag}: unmarked ${event.side} from ${fmt(event.previousLevel)} to about ${fmt(event.newLevel)}, starting about ${iso(event.changeTime)}`,
    at: event.signalTime,
    evidence: event,
  };
}

/** The alert for a data-quality event that opens one; the "-ended" events open none. */
export function dataQualityAlert(tag: string, event: DataQualityEvent): AlertInput | null {
  switch (event.kind) {
    case 'stale':
      return {
        tag,
        markId: null,
        kind: 'stale',
        dedupeKey: dedupeKeys.stale(tag),
        title: `${tag}: no sample since ${iso(event.lastSampleTime)} (usually every ${fmt(event.usualIntervalMs / 1000)} s)`,
        at: event.lastSampleTime + event.silentForMs,
        evidence: event,
      };
    case 'stuck':
      return {
        tag,
        markId: null,
        kind: 'stuck',
        dedupeKey: dedupeKeys.stuck(tag),
        title: `${tag}: the value ${fmt(event.value)} repeated ${event.count} times in a row since ${iso(event.since)}`,
        at: event.at,
        evidence: event,
      };
    case 'stale-ended':
    case 'stuck-ended':
      return null;
  }
}

export function outOfRangeAlert(event: OutOfRangeEvent): AlertInput {
  return {
    tag: event.tag,
    markId: null,
    kind: 'out-of-range',
    dedupeKey: dedupeKeys.outOfRange(event.tag),
    title: `${event.tag}: ${event.count} value${event.count === 1 ? '' : 's'} outside the valid range refused at ingest`,
    at: event.lastReceivedAt,
    evidence: event,
  };
}
