import { describe, expect, it } from 'vitest';
import { scratch } from './scratch.js';
import { windowDifferences } from './reference-distribution.js';

describe('scratch', () => {
  it('hands out a view of the asked length and keeps the memory for the next call', () => {
    const first = scratch('window-differences', 1000);
    expect(first.length).toBe(1000);
    const second = scratch('window-differences', 10);
    expect(second.length).toBe(10);
    expect(second.buffer).toBe(first.buffer);
    const larger = scratch('window-differences', 5000);
    expect(larger.length).toBe(5000);
    expect(larger.buffer).not.toBe(first.buffer);
  });

  it('gives the same window differences whether written into it or into fresh memory', () => {
    const history = Float64Array.from({ length: 500 }, (_, i) => Math.sin(i / 7) * 3 + (i % 5));
    const fresh = windowDifferences(history, 12, 8);
    const reused = windowDifferences(history, 12, 8, scratch('window-differences', fresh.length));
    expect(Array.from(reused)).toEqual(Array.from(fresh));
    expect(() => windowDifferences(history, 12, 8, new Float64Array(3))).toThrow(RangeError);
  });
});
