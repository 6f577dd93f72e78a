import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { referenceRisk } from './reference-distribution.js';
import { allowedExceedances, lowerQuantile, selectKth, upperQuantile } from './select.js';

// Adding 0 turns -0 into 0, which a sort and a selection may order differently.
const finite = fc.double({ min: -1e6, max: 1e6, noNaN: true }).map((v) => v + 0);
// Few distinct values, so ties are common.
const tied = fc.integer({ min: -5, max: 5 }).map((v) => v / 4);

describe('selectKth', () => {
  it('finds the k-th smallest like a full sort, and partitions around it', () => {
    fc.assert(
      fc.property(
        fc.oneof(
          fc.array(finite, { minLength: 1, maxLength: 50 }),
          fc.array(tied, { minLength: 1 }),
        ),
        fc.nat(),
        (list, seed) => {
          const k = seed % list.length;
          const values = Float64Array.from(list);
          const sorted = Float64Array.from(list).sort();
          expect(selectKth(values, k)).toBe(sorted[k]);
          for (let i = 0; i < k; i++)
            expect(values[i]).toBeLessThanOrEqual(sorted[k] ?? Number.NaN);
          for (let i = k + 1; i < values.length; i++) {
            expect(values[i]).toBeGreaterThanOrEqual(sorted[k] ?? Number.NaN);
          }
        },
      ),
      { numRuns: 300 },
    );
  });

  it('handles ranges long enough for the Floyd–Rivest sampling step', () => {
    fc.assert(
      fc.property(
        fc.array(fc.oneof(finite, tied), { minLength: 601, maxLength: 5000 }),
        fc.nat(),
        (list, seed) => {
          const k = seed % list.length;
          const sorted = Float64Array.from(list).sort();
          expect(selectKth(Float64Array.from(list), k)).toBe(sorted[k]);
        },
      ),
      { numRuns: 40 },
    );
  });

  it('rejects k outside the array', () => {
    expect(() => selectKth(new Float64Array(3), 3)).toThrow(RangeError);
    expect(() => selectKth(new Float64Array(3), -1)).toThrow(RangeError);
    expect(() => selectKth(new Float64Array(0), 0)).toThrow(RangeError);
  });
});

describe('allowedExceedances', () => {
  it('is the largest k with k / m <= riskLevel', () => {
    // Box, Hunter & Hunter, Statistics for Experimenters, 2nd ed., §3.1: with 191 reference
    // differences, 9 at or beyond the observed one is a risk of 0.047, still within 0.05.
    expect(allowedExceedances(191, 0.05)).toBe(9);
    expect(allowedExceedances(200, 0.05)).toBe(10); // 0.05 * 200 is not exactly 10 in binary
    expect(allowedExceedances(20, 0.05)).toBe(1);
    expect(allowedExceedances(19, 0.05)).toBe(0);
    fc.assert(
      fc.property(
        fc.integer({ min: 1, max: 1e6 }),
        fc.double({ min: 1e-6, max: 0.999, noNaN: true }),
        (m, alpha) => {
          const k = allowedExceedances(m, alpha);
          expect(k / m).toBeLessThanOrEqual(alpha);
          expect((k + 1) / m).toBeGreaterThan(alpha);
        },
      ),
    );
  });
});

describe('upperQuantile and lowerQuantile', () => {
  it('are the (k + 1)-th largest and smallest', () => {
    const values = [5, 1, 4, 2, 3, 9, 8, 7, 6, 10]; // k = 2 at riskLevel 0.2
    expect(upperQuantile(Float64Array.from(values), 0.2)).toBe(8);
    expect(lowerQuantile(Float64Array.from(values), 0.2)).toBe(3);
    expect(upperQuantile(Float64Array.from(values), 0.05)).toBe(10); // k = 0
  });

  it('agree with the risk of referenceRisk: shift beyond the point <=> risk <= riskLevel', () => {
    fc.assert(
      fc.property(
        fc.array(tied, { minLength: 20, maxLength: 200 }),
        tied,
        fc.constantFrom(0.05, 0.1, 0.25),
        (list, shift, alpha) => {
          const rise = referenceRisk(list, shift, { direction: 'rise', riskLevel: alpha });
          const fall = referenceRisk(list, shift, { direction: 'fall', riskLevel: alpha });
          if (rise.status !== 'ok' || fall.status !== 'ok') return;
          expect(upperQuantile(Float64Array.from(list), alpha) < shift).toBe(rise.credible);
          expect(lowerQuantile(Float64Array.from(list), alpha) > shift).toBe(fall.credible);
        },
      ),
      { numRuns: 300 },
    );
  });

  it('reject an empty sample or a risk level outside (0, 1)', () => {
    expect(() => upperQuantile(new Float64Array(0), 0.05)).toThrow(RangeError);
    expect(() => lowerQuantile(new Float64Array(3), 1)).toThrow(RangeError);
  });
});
