/**
 * Live evidence for one (mark, tag): the after-window grows with each analysed value up to the cap,
 * each evaluation is the whole evidence of @trueshift/stats computeEvidence against the tag's
 * in-control history before the mark, and the alert rule sits on top: an alert opens after
 * `alertAfter` consecutive credible evaluations in the mark's direction. Once an alert opened or
 * the cap is reached the verdict is settled and the after-window's level becomes the tag's new
 * watch baseline.
 */

import { computeEvidence } from '@trueshift/stats';
import type { Direction, Evidence, Verdict } from '@trueshift/stats';
import type { MarkRecord, TagKind } from '@trueshift/store';
import type { ChartDesign } from './chart-design.js';
import { createPeriods, periodClose, periodFold, periodMeans } from './period-means.js';
import type { PeriodState } from './period-means.js';
import { basisOf } from './settings.js';
import type { Basis, ResolvedTagSettings } from './settings.js';

/** The settings one (mark, tag) is judged with: the mark's own, else the tag's. */
export interface MarkSettings {
  direction: Direction;
  riskLevel: number;
  /** Fixed at the mark: the before-window does not grow with the after-window. */
  nBefore: number;
  nAfterCap: number;
  smallestShift: number | null;
  alertAfter: number;
  kind: TagKind;
  periodMs: number;
  settlingMs: number;
  cusum: { k: number; h: number } | null;
  ewma: { lambda: number; L: number } | null;
}

export function markSettings(
  mark: MarkRecord,
  tag: ResolvedTagSettings,
  design?: ChartDesign,
): MarkSettings {
  return {
    direction: mark.direction,
    riskLevel: mark.riskLevel ?? tag.riskLevel,
    nBefore: mark.nBefore ?? tag.nBefore,
    nAfterCap: mark.nAfterCap ?? tag.nAfterCap,
    smallestShift: mark.smallestShift ?? tag.smallestShift,
    alertAfter: tag.alertAfter,
    kind: tag.kind,
    periodMs: tag.periodMs,
    settlingMs: mark.settlingMs ?? 0,
    cusum: design === undefined ? null : { k: design.k, h: design.h },
    ewma: design === undefined ? null : { lambda: design.lambda, L: design.L },
  };
}

export type SettledReason = 'alert' | 'cap';

export interface MarkTagState {
  markId: string;
  tag: string;
  /** The mark revision this state belongs to; a correction starts over. */
  revision: number;
  at: number;
  basis: Basis;
  /** Analysed values since the mark (batch values or closed period means), up to the cap. */
  after: number[];
  /** Time of each analysed value: a batch's sample time, or the start of a period. */
  afterTimes: number[];
  /** Analysed values beyond the cap, not used. */
  afterUnused: number;
  /** Period means in the making, anchored at the mark; null for batch tags. */
  periods: PeriodState | null;
  /** Time of the latest raw sample folded in. */
  lastSampleTime: number | null;
  /** Values added since the last evaluation. */
  pending: boolean;
  evaluations: number;
  /**
   * Size of the after-window at the last evaluation, so values that arrive together are still
   * judged one look each. Absent in states saved before it was kept: taken as one look behind.
   */
  evaluatedSize?: number;
  /** Consecutive evaluations that were credible in the mark's direction and large enough. */
  consecutive: number;
  alertRaised: boolean;
  settled: SettledReason | null;
  /** Mean of the after-window when the verdict settled. */
  settledLevel: number | null;
  lastVerdict: Verdict | null;
  lastRisk: number | null;
}

export function createMarkTagState(
  mark: MarkRecord,
  tag: string,
  settings: Pick<MarkSettings, 'kind' | 'periodMs'>,
): MarkTagState {
  return {
    markId: mark.id,
    tag,
    revision: mark.revision,
    at: mark.at,
    basis: basisOf(settings.kind, settings.periodMs),
    after: [],
    afterTimes: [],
    afterUnused: 0,
    periods: settings.kind === 'continuous' ? createPeriods(settings.periodMs, mark.at) : null,
    lastSampleTime: null,
    pending: false,
    evaluations: 0,
    consecutive: 0,
    alertRaised: false,
    settled: null,
    settledLevel: null,
    lastVerdict: null,
    lastRisk: null,
  };
}

export type MarkSampleResult =
  /** Added to the after-window (or to the open period). */
  | 'added'
  /** Before the mark: it belongs to the history, not the after-window. */
  | 'before-mark'
  /** After the mark but older than a sample already folded in: the after-window must be rebuilt. */
  | 'late'
  /** The verdict is settled; nothing more is gathered. */
  | 'settled';

function pushAfter(state: MarkTagState, cap: number, value: number, time: number): void {
  if (state.after.length < cap) {
    state.after.push(value);
    state.afterTimes.push(time);
    state.pending = true;
  } else {
    state.afterUnused += 1;
  }
}

/** Folds one good raw sample of the tag in, in time order. */
export function markAddSample(
  state: MarkTagState,
  settings: Pick<MarkSettings, 'nAfterCap'>,
  t: number,
  value: number,
): MarkSampleResult {
  if (state.settled !== null) return 'settled';
  if (t < state.at) return 'before-mark';
  // (tag, time) is unique in the store, so an equal time is the same sample seen again.
  if (state.lastSampleTime !== null && t <= state.lastSampleTime) return 'late';
  if (!Number.isFinite(value)) return 'added';
  state.lastSampleTime = t;
  if (state.periods === null) {
    pushAfter(state, settings.nAfterCap, value, t);
    return 'added';
  }
  const fold = periodFold(state.periods, t, value);
  if (fold.kind === 'late') return 'late';
  if (fold.kind === 'closed') {
    pushAfter(state, settings.nAfterCap, fold.period.mean, fold.period.start);
  }
  return 'added';
}

/** Closes the open period once `now` is past its end; true when that added a value. */
export function markClosePeriod(
  state: MarkTagState,
  settings: Pick<MarkSettings, 'nAfterCap'>,
  now: number,
): boolean {
  if (state.settled !== null || state.periods === null) return false;
  const closed = periodClose(state.periods, now);
  if (closed === null) return false;
  pushAfter(state, settings.nAfterCap, closed.mean, closed.start);
  return true;
}

/**
 * Rebuilds the after-window from the tag's stored good samples since the mark (time order), after
 * back-fill landed inside it. The evaluation counters stay: they count evaluations, not samples.
 */
export function markRebuildAfter(
  state: MarkTagState,
  settings: Pick<MarkSettings, 'nAfterCap' | 'kind' | 'periodMs'>,
  t: ArrayLike<number>,
  value: ArrayLike<number>,
): void {
  state.after = [];
  state.afterTimes = [];
  state.afterUnused = 0;
  state.lastSampleTime = null;
  state.periods =
    settings.kind === 'continuous' ? createPeriods(settings.periodMs, state.at) : null;
  const settled = state.settled;
  // Rebuilding gathers again even for a settled state; the settled flag is restored after.
  state.settled = null;
  for (let i = 0; i < t.length; i++) {
    markAddSample(state, settings, t[i] ?? Number.NaN, value[i] ?? Number.NaN);
  }
  state.settled = settled;
  state.pending = state.after.length > 0;
}

export interface SettlingWindow {
  at: number;
  settlingMs: number;
}

/**
 * The settling periods of the other live marks on a tag that began before `before`: samples inside
 * them are the plant finding its new level and do not belong in any later mark's history.
 */
export function settlingWindows(
  marks: readonly MarkRecord[],
  tag: string,
  before: number,
  excludeId?: string,
): SettlingWindow[] {
  return marks
    .filter(
      (m) =>
        m.id !== excludeId &&
        m.withdrawnAt === null &&
        m.at < before &&
        (m.settlingMs ?? 0) > 0 &&
        m.tags.includes(tag),
    )
    .map((m) => ({ at: m.at, settlingMs: m.settlingMs ?? 0 }))
    .sort((a, b) => a.at - b.at);
}

/**
 * The in-control history for a mark from the tag's good samples (time order): those before the
 * mark, minus those inside the settling windows; for continuous tags then their period means,
 * anchored at the mark so the last period ends exactly there. One pass, O(N + windows).
 */
export function inControlHistory(
  t: ArrayLike<number>,
  value: ArrayLike<number>,
  options: {
    markAt: number;
    windows: readonly SettlingWindow[];
    kind: TagKind;
    periodMs: number;
  },
): Float64Array {
  const { markAt, windows } = options;
  const n = Math.min(t.length, value.length);
  const keepT = new Float64Array(n);
  const keepV = new Float64Array(n);
  let kept = 0;
  let w = 0;
  for (let i = 0; i < n; i++) {
    const ti = t[i] ?? Number.NaN;
    const x = value[i] ?? Number.NaN;
    if (!(ti < markAt) || !Number.isFinite(x)) continue;
    // Windows are sorted by start; those ending before this sample are done with.
    while (w < windows.length) {
      const win = windows[w];
      if (win === undefined || win.at + win.settlingMs > ti) break;
      w += 1;
    }
    let inside = false;
    for (let j = w; j < windows.length; j++) {
      const win = windows[j];
      if (win === undefined || win.at > ti) break;
      if (ti < win.at + win.settlingMs) {
        inside = true;
        break;
      }
    }
    if (inside) continue;
    keepT[kept] = ti;
    keepV[kept] = x;
    kept += 1;
  }
  if (options.kind === 'batch') return keepV.slice(0, kept);
  return periodMeans(keepT.subarray(0, kept), keepV.subarray(0, kept), options.periodMs, markAt)
    .mean;
}

export interface MarkEvaluation {
  markId: string;
  tag: string;
  basis: Basis;
  /** Time of the latest value the evidence includes (a batch's time, or its period's start). */
  sampleTime: number;
  nAfter: number;
  evidence: Evidence | null;
  verdict: Verdict;
  /** Reference risk in the mark's direction; null when there is not enough history. */
  risk: number | null;
  /** 1-based number of this evaluation of the (mark, tag). */
  number: number;
  /** Whether this evaluation counts towards an alert. */
  counts: boolean;
  consecutive: number;
  /** True on the evaluation that opens the alert. */
  openAlert: boolean;
  /** Set on the evaluation that settles the verdict. */
  settledNow: SettledReason | null;
  /** Whether the verdict is settled after this evaluation (now or before). */
  settled: SettledReason | null;
  /** The after-window's level when it settled now: the tag's new watch baseline. */
  newBaseline: number | null;
}

function credibleInDirection(verdict: Verdict, direction: Direction): boolean {
  if (verdict === 'credible-rise') return direction !== 'fall';
  if (verdict === 'credible-fall') return direction !== 'rise';
  return false;
}

function afterMean(after: readonly number[]): number {
  let sum = 0;
  for (const x of after) sum += x;
  return sum / after.length;
}

/**
 * One evaluation of the whole after-window against the history; O(N) in the history. Updates the
 * counters in `state` and says whether an alert opens and whether the verdict settled.
 */
export function evaluateMark(
  state: MarkTagState,
  history: ArrayLike<number>,
  settings: MarkSettings,
): MarkEvaluation {
  if (state.after.length === 0) throw new RangeError('There is no value after the mark yet.');
  let evidence: Evidence | null = null;
  let verdict: Verdict = 'not-enough-history';
  // computeEvidence needs two history values for a sigma; fewer is simply not enough history.
  if (history.length >= 2) {
    evidence = computeEvidence({
      history,
      after: state.after,
      direction: settings.direction,
      riskLevel: settings.riskLevel,
      nBefore: Math.min(settings.nBefore, history.length),
      nAfterCap: settings.nAfterCap,
      ...(settings.smallestShift === null ? {} : { smallestShift: settings.smallestShift }),
      ...(settings.cusum === null ? {} : { cusum: settings.cusum }),
      ...(settings.ewma === null ? {} : { ewma: settings.ewma }),
    });
    verdict = evidence.verdict;
  }
  const risk = evidence?.reference.status === 'ok' ? evidence.reference.risk : null;
  const largeEnough =
    settings.smallestShift === null ||
    (evidence !== null && Math.abs(evidence.observedShift) >= settings.smallestShift);
  const counts = credibleInDirection(verdict, settings.direction) && largeEnough;

  state.pending = false;
  state.evaluations += 1;
  state.evaluatedSize = state.after.length;
  state.consecutive = counts ? state.consecutive + 1 : 0;
  state.lastVerdict = verdict;
  state.lastRisk = risk;

  let openAlert = false;
  let settledNow: SettledReason | null = null;
  if (state.settled === null) {
    if (!state.alertRaised && state.consecutive >= settings.alertAfter) {
      openAlert = true;
      state.alertRaised = true;
      settledNow = 'alert';
    } else if (state.after.length >= settings.nAfterCap) {
      settledNow = 'cap';
    }
  }
  let newBaseline: number | null = null;
  if (settledNow !== null) {
    newBaseline = afterMean(state.after);
    state.settled = settledNow;
    state.settledLevel = newBaseline;
  }
  return {
    markId: state.markId,
    tag: state.tag,
    basis: state.basis,
    sampleTime: state.afterTimes[state.afterTimes.length - 1] ?? state.at,
    nAfter: state.after.length,
    evidence,
    verdict,
    risk,
    number: state.evaluations,
    counts,
    consecutive: state.consecutive,
    openAlert,
    settledNow,
    settled: state.settled,
    newBaseline,
  };
}

/**
 * Judges the values added since the last evaluation, as if they had been followed live one at a
 * time: the last `alertAfter` window sizes among them are judged in turn (earlier ones could not
 * change whether an alert opens, which takes `alertAfter` credible looks in a row). So a mark set in
 * the past can alert at once instead of needing more samples, and values that arrive together (a
 * burst, a back-log after a restart or a shard moving to another instance) count as the looks they
 * are, not as one: the outcome does not depend on how the samples were batched.
 */
export function evaluateMarkCatchUp(
  state: MarkTagState,
  history: ArrayLike<number>,
  settings: MarkSettings,
): MarkEvaluation[] {
  const n = state.after.length;
  const seen = state.evaluations === 0 ? 0 : Math.min(n, state.evaluatedSize ?? Math.max(0, n - 1));
  const added = n - seen;
  if (added <= 1) return [evaluateMark(state, history, settings)];
  const replay = Math.min(settings.alertAfter, added);
  const values = state.after;
  const times = state.afterTimes;
  const start = n - replay + 1;
  state.after = values.slice(0, start);
  state.afterTimes = times.slice(0, start);
  const out: MarkEvaluation[] = [];
  for (let size = start; ; size++) {
    out.push(evaluateMark(state, history, settings));
    if (state.settled !== null || size >= n) break;
    state.after.push(values[size] ?? Number.NaN);
    state.afterTimes.push(times[size] ?? Number.NaN);
  }
  return out;
}
