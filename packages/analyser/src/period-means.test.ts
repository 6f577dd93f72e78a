import { seededRandom } from '@trueshift/stats';
import { describe, expect, it } from 'vitest';
import {
  createPeriods,
  periodClose,
  periodFold,
  periodMeans,
  periodStartOf,
} from './period-means.js';
import type { ClosedPeriod } from './period-means.js';

describe('period means', () => {
  it('closes a period when a sample of a later one arrives, skipping empty periods', () => {
    const state = createPeriods(1000);
    expect(periodFold(state, 100, 1)).toEqual({ kind: 'open' });
    expect(periodFold(state, 900, 3)).toEqual({ kind: 'open' });
    // 1000..1999 stays empty: a gap is not a value.
    expect(periodFold(state, 2500, 10)).toEqual({
      kind: 'closed',
      period: { start: 0, end: 1000, mean: 2, count: 2 },
    });
    expect(periodFold(state, 2999, 20)).toEqual({ kind: 'open' });
    expect(periodClose(state, 2999)).toBeNull();
    expect(periodClose(state, 3000)).toEqual({ start: 2000, end: 3000, mean: 15, count: 2 });
    expect(periodClose(state, 5000)).toBeNull();
  });

  it('calls samples of closed periods late', () => {
    const state = createPeriods(1000);
    periodFold(state, 1500, 1);
    periodFold(state, 2500, 1);
    expect(periodFold(state, 1999, 5)).toEqual({ kind: 'late' });
    periodClose(state, 3000);
    expect(periodFold(state, 2999, 5)).toEqual({ kind: 'late' });
    expect(periodFold(state, 3000, 5)).toEqual({ kind: 'open' });
  });

  it('aligns periods to the anchor, also before it', () => {
    expect(periodStartOf(1234, 1000)).toBe(1000);
    expect(periodStartOf(1234, 1000, 500)).toBe(500);
    expect(periodStartOf(499, 1000, 500)).toBe(-500);
    expect(periodStartOf(-1, 1000)).toBe(-1000);
  });

  it('gives the same means in one pass over a history as folding sample by sample', () => {
    const random = seededRandom(7);
    const t: number[] = [];
    const v: number[] = [];
    let now = 0;
    for (let i = 0; i < 5000; i++) {
      now += Math.floor(random.uniform() * 700);
      t.push(now);
      v.push(50 + random.normal());
    }
    const state = createPeriods(60_000, 12_345);
    const folded: ClosedPeriod[] = [];
    for (let i = 0; i < t.length; i++) {
      const fold = periodFold(state, t[i] ?? 0, v[i] ?? 0);
      if (fold.kind === 'closed') folded.push(fold.period);
    }
    const last = periodClose(state, Number.MAX_SAFE_INTEGER);
    if (last !== null) folded.push(last);
    const batch = periodMeans(t, v, 60_000, 12_345);
    expect(Array.from(batch.start)).toEqual(folded.map((p) => p.start));
    expect(Array.from(batch.mean)).toEqual(folded.map((p) => p.mean));
  });

  it('survives a JSON round trip mid-period', () => {
    const state = createPeriods(1000);
    periodFold(state, 10, 2);
    const copy = JSON.parse(JSON.stringify(state)) as typeof state;
    periodFold(state, 20, 4);
    periodFold(copy, 20, 4);
    expect(periodFold(copy, 1010, 0)).toEqual(periodFold(state, 1010, 0));
  });

  it('refuses a period that is not a positive whole number of ms', () => {
    expect(() => createPeriods(0)).toThrow(RangeError);
    expect(() => createPeriods(1.5)).toThrow(RangeError);
  });
});
