import { describe, expect, it } from 'vitest';
import { ar1Series, seededRandom } from './random.js';

describe('seededRandom', () => {
  it('repeats for the same seed and differs for another', () => {
    const a = seededRandom(42);
    const b = seededRandom(42);
    const c = seededRandom(43);
    const first = [a.uniform(), a.uniform(), a.normal()];
    expect([b.uniform(), b.uniform(), b.normal()]).toEqual(first);
    expect(c.uniform()).not.toBe(first[0]);
  });

  it('gives uniforms on [0, 1) and normals with mean 0 and SD 1', () => {
    const random = seededRandom(7);
    let sum = 0;
    let sumSq = 0;
    const n = 200_000;
    for (let i = 0; i < n; i++) {
      const u = random.uniform();
      expect(u >= 0 && u < 1).toBe(true);
      const z = random.normal();
      sum += z;
      sumSq += z * z;
    }
    // Standard errors of the mean and variance at n = 200 000 are about 0.0022 and 0.0032.
    expect(Math.abs(sum / n)).toBeLessThan(0.01);
    expect(Math.abs(sumSq / n - 1)).toBeLessThan(0.015);
  });
});

describe('ar1Series', () => {
  it('has the asked level, SD and lag-1 correlation', () => {
    const x = ar1Series(seededRandom(1), 100_000, 50, 2, 0.6);
    let mean = 0;
    for (const v of x) mean += v;
    mean /= x.length;
    let c0 = 0;
    let c1 = 0;
    for (let i = 0; i < x.length; i++) {
      const d = (x[i] ?? 0) - mean;
      c0 += d * d;
      if (i + 1 < x.length) c1 += d * ((x[i + 1] ?? 0) - mean);
    }
    expect(mean).toBeCloseTo(50, 1);
    expect(Math.sqrt(c0 / x.length)).toBeCloseTo(2, 1);
    expect(c1 / c0).toBeCloseTo(0.6, 1);
  });

  it('refuses a non-stationary phi', () => {
    expect(() => ar1Series(seededRandom(1), 10, 0, 1, 1)).toThrow(RangeError);
  });
});
