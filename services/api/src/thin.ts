/**
 * Thinning for plots: the range is cut into equal time buckets and each keeps only its lowest and
 * highest sample, so spikes survive that plain decimation would drop. At most `maxPoints` samples
 * come back, in time order.
 */

export interface SampleSeries {
  t: ArrayLike<number>;
  /** NaN where the sample has no value. */
  value: ArrayLike<number>;
  quality: ArrayLike<number>;
}

/** Indices of the kept samples, ascending. */
export function thinIndices(series: SampleSeries, maxPoints: number): number[] {
  const n = series.t.length;
  if (!Number.isInteger(maxPoints) || maxPoints < 2) {
    throw new RangeError(`maxPoints must be a whole number >= 2, got ${maxPoints}`);
  }
  if (n <= maxPoints) return Array.from({ length: n }, (_, i) => i);
  const buckets = Math.floor(maxPoints / 2);
  const first = series.t[0] ?? 0;
  const span = (series.t[n - 1] ?? first) - first;
  const low = new Int32Array(buckets).fill(-1);
  const high = new Int32Array(buckets).fill(-1);
  const firstIn = new Int32Array(buckets).fill(-1);
  for (let i = 0; i < n; i++) {
    const t = series.t[i] ?? first;
    let b = span > 0 ? Math.floor(((t - first) / span) * buckets) : 0;
    if (b >= buckets) b = buckets - 1;
    if (firstIn[b] === -1) firstIn[b] = i;
    const x = series.value[i] ?? Number.NaN;
    if (Number.isNaN(x)) continue;
    const lo = low[b] ?? -1;
    const hi = high[b] ?? -1;
    if (lo === -1 || x < (series.value[lo] ?? Number.NaN)) low[b] = i;
    if (hi === -1 || x > (series.value[hi] ?? Number.NaN)) high[b] = i;
  }
  const kept: number[] = [];
  for (let b = 0; b < buckets; b++) {
    const lo = low[b] ?? -1;
    const hi = high[b] ?? -1;
    if (lo === -1) {
      // A bucket with samples but no values keeps one, so the plot shows the gap.
      const only = firstIn[b] ?? -1;
      if (only !== -1) kept.push(only);
    } else if (lo === hi) {
      kept.push(lo);
    } else {
      kept.push(Math.min(lo, hi), Math.max(lo, hi));
    }
  }
  return kept;
}
