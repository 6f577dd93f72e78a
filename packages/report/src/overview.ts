/**
 * Each tag's state at a glance, for the overview: one word a person can scan a long list for, and a
 * line saying why. Worst first: a data problem makes every other answer doubtful, an open alert
 * wants someone, then credible shifts, marks still gathering evidence, and quiet watching.
 */

import { isVerdict } from '@trueshift/stats';
import type { Verdict } from '@trueshift/stats';
import { formatPercent } from './format.js';
import { verdictTitle } from './figures.js';

export type TagState = 'data-problem' | 'alert-open' | 'credible-shift' | 'gathering' | 'watching';

export const TAG_STATE_TEXT: Readonly<Record<TagState, string>> = {
  'data-problem': 'Data problem',
  'alert-open': 'Alert open',
  'credible-shift': 'Credible shift',
  gathering: 'Gathering evidence',
  watching: 'Watching',
};

/** Lower is more urgent: the overview sorts by it. */
export const TAG_STATE_RANK: Readonly<Record<TagState, number>> = {
  'data-problem': 0,
  'alert-open': 1,
  'credible-shift': 2,
  gathering: 3,
  watching: 4,
};

export interface OverviewTagIn {
  name: string;
  unit: string | null;
  description: string | null;
  riskLevel: number;
  lastSample: { t: number; value: number | null } | null;
}

export interface OverviewMarkIn {
  id: string;
  at: number;
  label: string;
  tags: readonly string[];
  withdrawnAt: number | null;
}

export interface OverviewAlertIn {
  id: number;
  tag: string;
  kind: string;
  state: string;
  title: string;
}

export interface OverviewEvidenceIn {
  markId: string;
  tag: string;
  verdict: string;
  risk: number | null;
  nAfter: number;
}

export interface OverviewRow {
  name: string;
  unit: string | null;
  description: string | null;
  state: TagState;
  stateText: string;
  /** Why the tag is in this state, in a sentence. */
  detail: string;
  riskLevel: number;
  lastSample: { t: number; value: number | null } | null;
  mark: { id: string; at: number; label: string } | null;
  verdict: Verdict | null;
  risk: number | null;
  nAfter: number | null;
  /** Alerts not cleared yet (open or acknowledged). */
  alerts: { id: number; kind: string; state: string; title: string }[];
}

const DATA_KINDS = new Set(['stale', 'stuck', 'out-of-range']);
const SHIFT_KINDS = new Set(['credible-shift', 'unmarked-shift']);

function rowFor(
  tag: OverviewTagIn,
  marks: readonly OverviewMarkIn[],
  alerts: readonly OverviewAlertIn[],
  evidence: ReadonlyMap<string, OverviewEvidenceIn>,
): OverviewRow {
  // The newest live mark is the question the tag is being asked now.
  const mark =
    marks
      .filter((m) => m.withdrawnAt === null && m.tags.includes(tag.name))
      .sort((a, b) => b.at - a.at)[0] ?? null;
  const latest = mark === null ? undefined : evidence.get(`${mark.id}\u0000${tag.name}`);
  const verdict = latest !== undefined && isVerdict(latest.verdict) ? latest.verdict : null;
  const uncleared = alerts.filter((a) => a.tag === tag.name && a.state !== 'cleared');
  const dataAlert = uncleared.find((a) => DATA_KINDS.has(a.kind));
  const openShift = uncleared.find((a) => a.state === 'open' && SHIFT_KINDS.has(a.kind));

  let state: TagState;
  let detail: string;
  if (dataAlert !== undefined) {
    state = 'data-problem';
    detail = dataAlert.title;
  } else if (openShift !== undefined) {
    state = 'alert-open';
    detail = openShift.title;
  } else if (
    verdict === 'credible-rise' ||
    verdict === 'credible-fall' ||
    verdict === 'credible-but-small'
  ) {
    state = 'credible-shift';
    detail = `${verdictTitle(verdict)} after “${mark?.label ?? ''}” (risk ${formatPercent(latest?.risk)}).`;
  } else if (mark !== null && (verdict === null || verdict === 'still-gathering')) {
    state = 'gathering';
    detail =
      latest === undefined
        ? `Waiting for the first sample after “${mark.label}”.`
        : `${latest.nAfter} samples after “${mark.label}” so far (risk ${formatPercent(latest.risk)}).`;
  } else if (mark !== null && verdict === 'not-enough-history') {
    state = 'gathering';
    detail = `The history before “${mark.label}” is too short to judge yet.`;
  } else {
    state = 'watching';
    detail =
      mark === null
        ? 'No change marked; watched for shifts nobody marked.'
        : `No credible shift after “${mark.label}”; watched for shifts nobody marked.`;
  }
  return {
    name: tag.name,
    unit: tag.unit,
    description: tag.description,
    state,
    stateText: TAG_STATE_TEXT[state],
    detail,
    riskLevel: tag.riskLevel,
    lastSample: tag.lastSample,
    mark: mark === null ? null : { id: mark.id, at: mark.at, label: mark.label },
    verdict,
    risk: latest?.risk ?? null,
    nAfter: latest?.nAfter ?? null,
    alerts: uncleared.map((a) => ({ id: a.id, kind: a.kind, state: a.state, title: a.title })),
  };
}

/** Key of a (mark, tag) pair in the evidence map. */
export function evidenceKey(markId: string, tag: string): string {
  return `${markId}\u0000${tag}`;
}

/** One row per tag, most urgent first, then by name. */
export function overviewRows(input: {
  tags: readonly OverviewTagIn[];
  marks: readonly OverviewMarkIn[];
  alerts: readonly OverviewAlertIn[];
  evidence: readonly OverviewEvidenceIn[];
}): OverviewRow[] {
  const latest = new Map<string, OverviewEvidenceIn>();
  for (const e of input.evidence) latest.set(evidenceKey(e.markId, e.tag), e);
  return input.tags
    .map((tag) => rowFor(tag, input.marks, input.alerts, latest))
    .sort(
      (a, b) =>
        TAG_STATE_RANK[a.state] - TAG_STATE_RANK[b.state] || a.name.localeCompare(b.name, 'en'),
    );
}
