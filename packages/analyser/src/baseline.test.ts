import { sampleStandardDeviation, seededRandom } from '@trueshift/stats';
import { describe, expect, it } from 'vitest';
import { robustBaseline } from './baseline.js';

describe('robustBaseline', () => {
  it('estimates the noise of independent normal values', () => {
    const random = seededRandom(11);
    const x = Array.from({ length: 4000 }, () => 20 + 2 * random.normal());
    const baseline = robustBaseline(x);
    // The median moving range / 0.954 is an unbiased sigma for normal data (Wheeler's constant, as
    // in @trueshift/stats sigma.ts); 4000 values leave a few per cent of sampling error.
    expect(baseline?.sigma).toBeCloseTo(2, 0);
    expect(Math.abs((baseline?.sigma ?? 0) - 2)).toBeLessThan(0.1);
    expect(baseline?.mean).toBeCloseTo(20, 1);
    expect(baseline?.sigmaMethod).toBe('median-moving-range');
  });

  it('is barely moved by a step in the history, unlike the sample SD', () => {
    const random = seededRandom(12);
    const x = Array.from({ length: 400 }, (_, i) => (i < 200 ? 0 : 5) + random.normal());
    const baseline = robustBaseline(x);
    expect(sampleStandardDeviation(x)).toBeGreaterThan(2.5);
    expect(baseline?.sigma).toBeLessThan(1.2);
  });

  it('falls back when most values repeat, and gives up on a flat tag', () => {
    const mostlyRepeated = Array.from({ length: 40 }, (_, i) => (i % 5 === 0 ? 1 : 0));
    expect(robustBaseline(mostlyRepeated)?.sigmaMethod).toBe('average-moving-range');
    expect(robustBaseline([3, 3, 3, 3])).toBeNull();
    expect(robustBaseline([3])).toBeNull();
    expect(robustBaseline([1, Number.NaN, 2, 4])?.n).toBe(3);
  });
});
