/**
 * Means over fixed periods of a continuous signal. A continuous tag sampled every few seconds is
 * strongly autocorrelated from one raw sample to the next; its period means are the values the
 * evidence and the charts judge, one per period, while the raw samples stay in the store.
 *
 * Periods are [anchor + i·periodMs, anchor + (i+1)·periodMs). The watch anchors them at the epoch so
 * they fall on round clock times; a mark anchors them at its own time so no period mixes samples
 * from before and after the change.
 */

export interface PeriodState {
  periodMs: number;
  anchor: number;
  /** Start of the period being filled, or null when none is open. */
  start: number | null;
  sum: number;
  count: number;
  /** End of the latest closed period: a sample before it arrives too late to count. */
  closedUntil: number | null;
}

export interface ClosedPeriod {
  start: number;
  end: number;
  mean: number;
  /** Samples averaged. */
  count: number;
}

export type PeriodFold =
  | { kind: 'open' }
  | { kind: 'closed'; period: ClosedPeriod }
  /** The sample belongs to a period already closed (or before the open one): back-fill. */
  | { kind: 'late' };

export function periodStartOf(t: number, periodMs: number, anchor = 0): number {
  return anchor + Math.floor((t - anchor) / periodMs) * periodMs;
}

export function createPeriods(periodMs: number, anchor = 0): PeriodState {
  if (!(Number.isInteger(periodMs) && periodMs > 0)) {
    throw new RangeError(`periodMs must be a whole number > 0, got ${periodMs}.`);
  }
  if (!Number.isFinite(anchor)) throw new RangeError(`anchor must be finite, got ${anchor}.`);
  return { periodMs, anchor, start: null, sum: 0, count: 0, closedUntil: null };
}

function takeOpen(state: PeriodState): ClosedPeriod | null {
  const start = state.start;
  if (start === null || state.count === 0) return null;
  const period: ClosedPeriod = {
    start,
    end: start + state.periodMs,
    mean: state.sum / state.count,
    count: state.count,
  };
  state.closedUntil = period.end;
  state.start = null;
  state.sum = 0;
  state.count = 0;
  return period;
}

/**
 * Adds one sample. A sample of a later period closes the open one (empty periods in between give
 * nothing: a gap is not a value). Non-finite values are ignored.
 */
export function periodFold(state: PeriodState, t: number, value: number): PeriodFold {
  if (!Number.isFinite(value) || !Number.isFinite(t)) return { kind: 'open' };
  const start = periodStartOf(t, state.periodMs, state.anchor);
  if (state.closedUntil !== null && t < state.closedUntil) return { kind: 'late' };
  if (state.start !== null && start < state.start) return { kind: 'late' };
  if (state.start === null || start === state.start) {
    state.start = start;
    state.sum += value;
    state.count += 1;
    return { kind: 'open' };
  }
  const closed = takeOpen(state);
  state.start = start;
  state.sum = value;
  state.count = 1;
  return closed === null ? { kind: 'open' } : { kind: 'closed', period: closed };
}

/**
 * Closes the open period once `now` has reached its end, so a tag that goes quiet still delivers
 * its last period. Callers pass now minus a grace for samples still on their way.
 */
export function periodClose(state: PeriodState, now: number): ClosedPeriod | null {
  if (state.start === null || now < state.start + state.periodMs) return null;
  return takeOpen(state);
}

/**
 * Period means of a whole series in time order, one pass: the batch counterpart of periodFold for
 * a history read from the store. The last period is included as it stands, since the history ends
 * where the caller cut it (at a mark, on a period boundary when anchored there).
 */
export function periodMeans(
  t: ArrayLike<number>,
  value: ArrayLike<number>,
  periodMs: number,
  anchor = 0,
): { start: Float64Array; mean: Float64Array } {
  const n = Math.min(t.length, value.length);
  const starts: number[] = [];
  const means: number[] = [];
  let current = Number.NaN;
  let sum = 0;
  let count = 0;
  for (let i = 0; i < n; i++) {
    const ti = t[i] ?? Number.NaN;
    const x = value[i] ?? Number.NaN;
    if (!Number.isFinite(x) || !Number.isFinite(ti)) continue;
    const start = periodStartOf(ti, periodMs, anchor);
    if (start !== current) {
      if (count > 0) {
        starts.push(current);
        means.push(sum / count);
      }
      current = start;
      sum = 0;
      count = 0;
    }
    sum += x;
    count += 1;
  }
  if (count > 0) {
    starts.push(current);
    means.push(sum / count);
  }
  return { start: Float64Array.from(starts), mean: Float64Array.from(means) };
}
