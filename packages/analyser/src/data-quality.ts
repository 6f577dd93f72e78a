/**
 * The data-quality watch of one tag: stale (nothing usable arrives), stuck (one value over and over
 * on a tag that normally varies) and out of range (seen at ingest, counted from the quarantine).
 * A flat or silent transmitter makes every other statistic meaningless, so these come first.
 *
 * The state is a plain object, updated in O(1) per sample; only the stale check sorts a few gaps.
 */

export interface DataQualitySettings {
  staleAfterIntervals: number;
  /** Stuck when one value repeats more than this many times in a row. */
  stuckAfter: number;
}

/** Recent gaps kept for the usual sampling interval. */
const GAPS_KEPT = 31;
/** Gaps needed before the usual interval is trusted enough to call a tag stale. */
const MIN_GAPS = 5;
/**
 * Weight of the newest pair in the running share of samples that differ from the one before:
 * 1/50 remembers about the last 50 pairs.
 */
const VARY_WEIGHT = 1 / 50;
/** Pairs seen before the share is trusted. */
const MIN_PAIRS = 30;
/**
 * A tag "normally varies" when at least half of its consecutive samples differ. Coarsely quantised
 * tags (a valve at 0 or 100 %) repeat most of the time, and a long run of one value is normal there.
 */
const VARIES_SHARE = 0.5;

export interface DataQualityState {
  lastTime: number | null;
  /** Ring of the latest gaps between good samples, ms. */
  gaps: number[];
  gapNext: number;
  stale: boolean;
  lastValue: number | null;
  /** Length of the current run of identical values (1 after a change). */
  run: number;
  runSince: number | null;
  stuck: boolean;
  pairs: number;
  /** Running share of samples that differ from the one before. */
  varyShare: number;
  /** The share as it stood when the current run began, before the run itself pulled it down. */
  varyShareAtRunStart: number;
  pairsAtRunStart: number;
}

export type DataQualityEvent =
  | {
      kind: 'stale';
      lastSampleTime: number;
      usualIntervalMs: number;
      silentForMs: number;
      staleAfterMs: number;
    }
  | { kind: 'stale-ended'; at: number; silentForMs: number }
  | { kind: 'stuck'; value: number; count: number; since: number; at: number }
  | { kind: 'stuck-ended'; at: number; count: number };

export function createDataQuality(): DataQualityState {
  return {
    lastTime: null,
    gaps: [],
    gapNext: 0,
    stale: false,
    lastValue: null,
    run: 0,
    runSince: null,
    stuck: false,
    pairs: 0,
    varyShare: 0,
    varyShareAtRunStart: 0,
    pairsAtRunStart: 0,
  };
}

/** Median of the recent gaps, or null while too few are known. */
export function usualInterval(state: DataQualityState): number | null {
  if (state.gaps.length < MIN_GAPS) return null;
  const sorted = [...state.gaps].sort((a, b) => a - b);
  const mid = sorted.length >> 1;
  return sorted.length % 2 === 1
    ? (sorted[mid] ?? Number.NaN)
    : ((sorted[mid - 1] ?? 0) + (sorted[mid] ?? 0)) / 2;
}

/**
 * One good sample in time order (back-fill is the caller's to keep out). Returns the events it
 * causes: the end of a stale spell, a stuck run reaching its limit, or a stuck run ending.
 */
export function dataQualitySample(
  state: DataQualityState,
  settings: DataQualitySettings,
  t: number,
  value: number,
): DataQualityEvent[] {
  const events: DataQualityEvent[] = [];
  if (state.lastTime !== null) {
    const gap = t - state.lastTime;
    if (state.stale) events.push({ kind: 'stale-ended', at: t, silentForMs: gap });
    if (gap > 0) {
      if (state.gaps.length < GAPS_KEPT) state.gaps.push(gap);
      else state.gaps[state.gapNext] = gap;
      state.gapNext = (state.gapNext + 1) % GAPS_KEPT;
    }
  }
  state.stale = false;
  state.lastTime = t;

  if (state.lastValue === null) {
    state.run = 1;
    state.runSince = t;
  } else {
    const same = value === state.lastValue;
    state.pairs += 1;
    // A plain running mean until 50 pairs are in, so the share is not biased towards its start of 0.
    const weight = Math.max(VARY_WEIGHT, 1 / state.pairs);
    state.varyShare += weight * ((same ? 0 : 1) - state.varyShare);
    if (same) {
      state.run += 1;
    } else {
      if (state.stuck) events.push({ kind: 'stuck-ended', at: t, count: state.run });
      state.stuck = false;
      state.run = 1;
      state.runSince = t;
      state.varyShareAtRunStart = state.varyShare;
      state.pairsAtRunStart = state.pairs;
    }
  }
  state.lastValue = value;

  const normallyVaries =
    state.pairsAtRunStart >= MIN_PAIRS && state.varyShareAtRunStart >= VARIES_SHARE;
  if (!state.stuck && normallyVaries && state.run > settings.stuckAfter) {
    state.stuck = true;
    events.push({ kind: 'stuck', value, count: state.run, since: state.runSince ?? t, at: t });
  }
  return events;
}

/**
 * The stale check, run with the clock: stale once nothing has arrived for staleAfterIntervals ×
 * the usual interval. Reports once per silent spell.
 */
export function dataQualityCheck(
  state: DataQualityState,
  settings: DataQualitySettings,
  now: number,
): DataQualityEvent | null {
  if (state.stale || state.lastTime === null) return null;
  const usual = usualInterval(state);
  if (usual === null || !(usual > 0)) return null;
  const staleAfterMs = settings.staleAfterIntervals * usual;
  const silentForMs = now - state.lastTime;
  if (silentForMs <= staleAfterMs) return null;
  state.stale = true;
  return {
    kind: 'stale',
    lastSampleTime: state.lastTime,
    usualIntervalMs: usual,
    silentForMs,
    staleAfterMs,
  };
}

export interface OutOfRangeEvent {
  kind: 'out-of-range';
  tag: string;
  count: number;
  firstReceivedAt: number;
  lastReceivedAt: number;
  /** A few of the refused inputs, as received. */
  examples: string[];
}

/**
 * Turns quarantine entries (any order, any codes) into one out-of-range event per tag, counting the
 * VALUE_OUT_OF_RANGE refusals: ingest refuses such values, so the analyser never sees them as
 * samples.
 */
export function outOfRangeEvents(
  entries: readonly { tag: string | null; code: string; receivedAt: number; raw: string }[],
  maxExamples = 3,
): OutOfRangeEvent[] {
  const byTag = new Map<string, OutOfRangeEvent>();
  for (const entry of entries) {
    if (entry.code !== 'VALUE_OUT_OF_RANGE' || entry.tag === null) continue;
    let event = byTag.get(entry.tag);
    if (event === undefined) {
      event = {
        kind: 'out-of-range',
        tag: entry.tag,
        count: 0,
        firstReceivedAt: entry.receivedAt,
        lastReceivedAt: entry.receivedAt,
        examples: [],
      };
      byTag.set(entry.tag, event);
    }
    event.count += 1;
    event.firstReceivedAt = Math.min(event.firstReceivedAt, entry.receivedAt);
    event.lastReceivedAt = Math.max(event.lastReceivedAt, entry.receivedAt);
    if (event.examples.length < maxExamples) event.examples.push(entry.raw);
  }
  return [...byTag.values()];
}
