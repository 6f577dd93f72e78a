import { describe, expect, it } from 'vitest';
import { thinIndices } from './thin.js';

function series(values: readonly number[], times?: readonly number[]) {
  return {
    t: Float64Array.from(times ?? values.map((_, i) => i * 1000)),
    value: Float64Array.from(values),
    quality: new Int32Array(values.length).fill(192),
  };
}

describe('thinIndices', () => {
  it('keeps everything when there are no more samples than asked for', () => {
    expect(thinIndices(series([3, 1, 2]), 3)).toEqual([0, 1, 2]);
  });

  it('keeps the lowest and highest of each time bucket, in time order', () => {
    // 12 samples, 3 buckets of 4: [5, 9, 1, 5] [5, 5, 5, 5] [2, 8, 8, 0]
    const values = [5, 9, 1, 5, 5, 5, 5, 5, 2, 8, 8, 0];
    const kept = thinIndices(series(values), 6);
    expect(kept).toEqual([1, 2, 4, 9, 11]);
    expect(kept.map((i) => values[i])).toEqual([9, 1, 5, 8, 0]);
  });

  it('never returns more than asked, and keeps a lone spike', () => {
    const values = Array.from({ length: 10_000 }, (_, i) => Math.sin(i / 50));
    values[4321] = 100;
    const kept = thinIndices(series(values), 101);
    expect(kept.length).toBeLessThanOrEqual(101);
    expect(kept).toContain(4321);
    expect([...kept].sort((a, b) => a - b)).toEqual(kept);
  });

  it('buckets by time, so a burst of samples does not take every point', () => {
    const times = [0, 1, 2, 3, 4, 5, 6, 7, 1000, 2000];
    const kept = thinIndices(series([1, 2, 3, 4, 5, 6, 7, 8, 9, 10], times), 4);
    // Two buckets: [0, 1000) holds the burst, [1000, 2000] the two late samples.
    expect(kept).toEqual([0, 7, 8, 9]);
  });

  it('keeps one sample of a bucket that has samples but no values, to show the gap', () => {
    // 3 buckets over 0..6 s: [1, 2] [NaN, NaN] [3, 4, 5]
    const kept = thinIndices(series([1, 2, NaN, NaN, 3, 4, 5]), 6);
    expect(kept).toEqual([0, 1, 2, 4, 6]);
  });

  it('refuses fewer than two points', () => {
    expect(() => thinIndices(series([1, 2, 3]), 1)).toThrow(RangeError);
  });
});
