import { describe, expect, it } from 'vitest';
import { SampleColumnsBuilder } from './sample-columns.js';

describe('SampleColumnsBuilder', () => {
  it('grows past its first capacity and keeps every sample in place, in either order', () => {
    const forward = new SampleColumnsBuilder();
    const backward = new SampleColumnsBuilder();
    for (let page = 0; page < 5; page++) {
      const at = forward.reserve(1000);
      const back = backward.reserve(1000);
      for (let k = 0; k < 1000; k++) {
        const i = page * 1000 + k;
        forward.set(at + k, i, i % 7 === 0 ? Number.NaN : i / 2, 192);
        backward.set(back + k, 4999 - i, 0, i % 2 === 0 ? 192 : 0);
      }
    }
    const columns = forward.finish(false);
    expect(columns.t).toHaveLength(5000);
    expect(columns.t[4321]).toBe(4321);
    expect(columns.value[14]).toBeNaN();
    expect(columns.value[15]).toBe(7.5);
    expect(forward.lastTime()).toBe(4999);
    const reversed = backward.finish(true);
    expect(Array.from(reversed.t.subarray(0, 3))).toEqual([0, 1, 2]);
    expect(reversed.quality[4999]).toBe(192);
  });
});
