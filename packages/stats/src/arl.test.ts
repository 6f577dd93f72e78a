import jStat from 'jstat';
import { describe, expect, it } from 'vitest';
import { cusumArl, ewmaArl, solveCusumH, solveEwmaL } from './arl.js';

/**
 * A published ARL printed as text, so its precision is known: the check allows half a unit in the
 * last printed digit plus `rel` for the Markov-chain approximation and for the design constants
 * (h, L) themselves being printed rounded.
 */
function expectArl(computed: number, printed: string, rel: number, label: string): void {
  const published = Number(printed);
  const decimals = printed.includes('.') ? (printed.split('.')[1]?.length ?? 0) : 0;
  const allowed = 0.5 * 10 ** -decimals + rel * published;
  expect(Math.abs(computed - published), `${label}: ${computed} vs ${printed}`).toBeLessThanOrEqual(
    allowed,
  );
}

const CUSUM_SHIFTS = [0, 0.25, 0.5, 0.75, 1, 1.5, 2, 2.5, 3, 4];
// Relative slack for the CUSUM chain with the default 100 states. During development no value in
// the tables below differed from the printed one by more than the printed rounding (largest plain
// relative difference 0.33%, 17.05 against 17.0 at h = 5).
const CUSUM_REL = 0.002;

describe('cusumArl (Brook & Evans Markov chain)', () => {
  it('matches the two-sided ARL table for k = 1/2, h = 4 and h = 5', () => {
    // Montgomery, Introduction to Statistical Quality Control, 6th ed. (Wiley, 2009), Table 9.3
    // "ARL performance of the tabular CUSUM with k = 1/2 and h = 4 or h = 5" (from memory, table
    // number included). The h = 4 column was also read during this work in a quotation of Lucas &
    // Crosier (1982), Technometrics 24(3), Table 1.
    const h4 = ['168', '74.2', '26.6', '13.3', '8.38', '4.75', '3.34', '2.62', '2.19', '1.71'];
    const h5 = ['465', '139', '38.0', '17.0', '10.4', '5.75', '4.01', '3.11', '2.57', '2.01'];
    CUSUM_SHIFTS.forEach((shift, i) => {
      expectArl(cusumArl({ k: 0.5, h: 4, shift }), h4[i] ?? '', CUSUM_REL, `h=4 shift=${shift}`);
      expectArl(cusumArl({ k: 0.5, h: 5, shift }), h5[i] ?? '', CUSUM_REL, `h=5 shift=${shift}`);
    });
    // Lucas & Crosier (1982) Table 1, shift 5σ, h = 4 (read in the same quotation).
    expectArl(cusumArl({ k: 0.5, h: 4, shift: 5 }), '1.31', CUSUM_REL, 'h=4 shift=5');
  });

  it('matches one-sided ARLs for k = 0.5, h = 3', () => {
    // Waldmann (1986), Technometrics 28(1), Tables 3, 1 and 5 (read during this work in a
    // quotation): 1963, 117.4 and 17.35 at shifts −0.5, 0 and 0.5.
    expectArl(cusumArl({ k: 0.5, h: 3, shift: -0.5, sides: 1 }), '1963', CUSUM_REL, 'shift=-0.5');
    expectArl(cusumArl({ k: 0.5, h: 3, shift: 0, sides: 1 }), '117.4', CUSUM_REL, 'shift=0');
    expectArl(cusumArl({ k: 0.5, h: 3, shift: 0.5, sides: 1 }), '17.35', CUSUM_REL, 'shift=0.5');
  });

  it('gives shorter out-of-control ARLs with a head start of h/2 (fast initial response)', () => {
    // Lucas & Crosier (1982), Technometrics 24(3), Table 1, two-sided k = 0.5, h = 4, head start 2
    // (read during this work in a quotation of that table).
    const fir = ['149', '62.7', '20.1', '8.97', '5.29', '2.86', '2.01', '1.59', '1.32', '1.07'];
    CUSUM_SHIFTS.forEach((shift, i) => {
      const withHead = cusumArl({ k: 0.5, h: 4, shift, headStart: 2 });
      // Largest excess over the printed rounding seen in development: 0.03% (1.325 against 1.32).
      expectArl(withHead, fir[i] ?? '', CUSUM_REL, `FIR shift=${shift}`);
      // Lucas & Crosier (1982): the head start lowers every ARL, most of all for shifted processes.
      expect(withHead).toBeLessThan(cusumArl({ k: 0.5, h: 4, shift }));
    });
    const inControlRatio = cusumArl({ k: 0.5, h: 4, shift: 0, headStart: 2 }) / 168;
    const oneSigmaRatio = cusumArl({ k: 0.5, h: 4, shift: 1, headStart: 2 }) / 8.38;
    expect(inControlRatio).toBeGreaterThan(0.85);
    expect(oneSigmaRatio).toBeLessThan(0.7);
  });

  it('tends to 1/P(X > k) as h -> 0, with tail probabilities from jstat', () => {
    for (const k of [0, 0.5, 1.5, 3, 4.5]) {
      // jstat normal CDF (npm registry), independent of the module's own CDF.
      const expected = 1 / (1 - jStat.normal.cdf(k, 0, 1));
      const computed = cusumArl({ k, h: 1e-7, shift: 0, sides: 1, states: 11 });
      expect(Math.abs(computed / expected - 1), `k=${k}`).toBeLessThan(1e-5);
    }
  });

  it('has converged at the default 100 states', () => {
    const coarse = cusumArl({ k: 0.5, h: 5, shift: 0 });
    const fine = cusumArl({ k: 0.5, h: 5, shift: 0, states: 400 });
    expect(Math.abs(coarse / fine - 1)).toBeLessThan(1e-3);
  });

  it('rejects impossible options with RangeError', () => {
    expect(() => cusumArl({ k: -1, h: 4, shift: 0 })).toThrow(RangeError);
    expect(() => cusumArl({ k: 0.5, h: 0, shift: 0 })).toThrow(RangeError);
    expect(() => cusumArl({ k: 0.5, h: 4, shift: Number.NaN })).toThrow(RangeError);
    expect(() => cusumArl({ k: 0.5, h: 4, shift: 0, headStart: 4 })).toThrow(RangeError);
    expect(() => cusumArl({ k: 0.5, h: 4, shift: 0, states: 5 })).toThrow(RangeError);
    expect(() => cusumArl({ k: 0.5, h: 4, shift: 0, states: 100.5 })).toThrow(RangeError);
    expect(() => cusumArl({ k: 0.5, h: 4, shift: 0, sides: 3 as 1 })).toThrow(RangeError);
  });
});

describe('ewmaArl (Lucas & Saccucci Markov chain)', () => {
  const shifts = [0, 0.25, 0.5, 0.75, 1, 1.5, 2, 2.5, 3, 4];
  // Relative slack beyond the printed rounding, for the 151-state chain and for L printed to 3
  // decimals (in control the ARL moves about 0.4% per 0.001 of L). The largest excess seen in
  // development was 0.16% (83.99 against 84.1, λ = 0.05, L = 2.615).
  const EWMA_REL = 0.003;

  it('matches the table of EWMA ARLs for several (λ, L) designs', () => {
    // Montgomery, Introduction to Statistical Quality Control, 6th ed. (Wiley, 2009), Table 9.11
    // "Average run lengths for several EWMA control schemes", adapted from Lucas & Saccucci (1990),
    // Technometrics 32(1) (from memory).
    const table: [number, number, string[]][] = [
      [0.4, 3.054, ['500', '224', '71.2', '28.4', '14.3', '5.9', '3.5', '2.5', '2.0', '1.4']],
      [0.25, 2.998, ['500', '170', '48.2', '20.1', '11.1', '5.5', '3.6', '2.7', '2.3', '1.7']],
      [0.2, 2.962, ['500', '150', '41.8', '18.2', '10.5', '5.5', '3.7', '2.9', '2.4', '1.9']],
      [0.1, 2.814, ['500', '106', '31.3', '15.9', '10.3', '6.1', '4.4', '3.4', '2.9', '2.2']],
      [0.05, 2.615, ['500', '84.1', '28.8', '16.4', '11.4', '7.1', '5.2', '4.2', '3.5', '2.7']],
    ];
    for (const [lambda, L, printed] of table) {
      shifts.forEach((shift, i) => {
        expectArl(
          ewmaArl({ lambda, L, shift }),
          printed[i] ?? '',
          EWMA_REL,
          `λ=${lambda} δ=${shift}`,
        );
      });
    }
  });

  it('matches Lucas & Saccucci (1990) Table 3 for λ = 0.5 and λ = 0.03', () => {
    // Lucas & Saccucci (1990), Technometrics 32(1), Table 3 (read during this work in a quotation).
    const moreShifts = [0, 0.25, 0.5, 0.75, 1, 1.5, 2, 2.5, 3, 3.5, 4, 5];
    const half = [
      '500',
      '255',
      '88.8',
      '35.9',
      '17.5',
      '6.53',
      '3.63',
      '2.50',
      '1.93',
      '1.58',
      '1.34',
      '1.07',
    ];
    const small = [
      '500',
      '76.7',
      '29.3',
      '17.6',
      '12.6',
      '8.07',
      '5.99',
      '4.80',
      '4.03',
      '3.49',
      '3.11',
      '2.55',
    ];
    moreShifts.forEach((shift, i) => {
      expectArl(
        ewmaArl({ lambda: 0.5, L: 3.071, shift }),
        half[i] ?? '',
        EWMA_REL,
        `λ=0.5 δ=${shift}`,
      );
      // λ = 0.03 needs a finer grid: the band is narrow against the spread of λX.
      const computed = ewmaArl({ lambda: 0.03, L: 2.437, shift, states: 251 });
      expectArl(computed, small[i] ?? '', EWMA_REL, `λ=0.03 δ=${shift}`);
    });
  });

  it('reduces to the Shewhart chart for λ = 1', () => {
    // With λ = 1 the chart signals when |X| > L, so ARL = 1 / P(|X| > L); jstat normal CDF (npm).
    const p = 1 - jStat.normal.cdf(3, 0.5, 1) + jStat.normal.cdf(-3, 0.5, 1);
    const computed = ewmaArl({ lambda: 1, L: 3, shift: 0.5, states: 11 });
    expect(Math.abs(computed * p - 1)).toBeLessThan(1e-9);
  });

  it('has nearly converged at the default 151 states', () => {
    const coarse = ewmaArl({ lambda: 0.1, L: 2.814, shift: 0 });
    const fine = ewmaArl({ lambda: 0.1, L: 2.814, shift: 0, states: 401 });
    expect(Math.abs(coarse / fine - 1)).toBeLessThan(3e-3);
  });

  it('rejects impossible options with RangeError', () => {
    expect(() => ewmaArl({ lambda: 0, L: 3, shift: 0 })).toThrow(RangeError);
    expect(() => ewmaArl({ lambda: 1.2, L: 3, shift: 0 })).toThrow(RangeError);
    expect(() => ewmaArl({ lambda: 0.2, L: 0, shift: 0 })).toThrow(RangeError);
    expect(() => ewmaArl({ lambda: 0.2, L: 3, shift: 0, states: 100 })).toThrow(RangeError);
  });
});

describe('design solvers', () => {
  it('finds h ≈ 4 for ARL0 168 and h ≈ 5 for ARL0 465 (k = 1/2, two-sided)', () => {
    // Montgomery, ISQC 6th ed., Table 9.3 (from memory): k = 1/2 with h = 4 gives 168, h = 5 gives 465.
    expect(solveCusumH({ k: 0.5, targetArl: 168, sides: 2 })).toBeCloseTo(4, 2);
    expect(solveCusumH({ k: 0.5, targetArl: 465, sides: 2 })).toBeCloseTo(5, 2);
  });

  it('finds L ≈ 2.814 for λ = 0.1 and ARL0 500', () => {
    // Lucas & Saccucci (1990) via Montgomery ISQC 6th ed. Table 9.11 (from memory): λ = 0.1, L = 2.814.
    expect(Math.abs(solveEwmaL({ lambda: 0.1, targetArl: 500 }) - 2.814)).toBeLessThan(2e-3);
  });

  it('round-trips: the ARL at the solved parameter is the target', () => {
    for (const [k, target, sides] of [
      [0.5, 370, 2],
      [0.25, 500, 1],
      [1, 100, 2],
    ] as const) {
      const h = solveCusumH({ k, targetArl: target, sides });
      expect(Math.abs(cusumArl({ k, h, shift: 0, sides }) / target - 1)).toBeLessThan(1e-6);
    }
    for (const [lambda, target] of [
      [0.05, 370],
      [0.3, 1000],
    ] as const) {
      const L = solveEwmaL({ lambda, targetArl: target });
      expect(Math.abs(ewmaArl({ lambda, L, shift: 0 }) / target - 1)).toBeLessThan(1e-6);
    }
  });

  it('rejects unreachable or impossible targets with RangeError', () => {
    expect(() => solveCusumH({ k: 0.5, targetArl: 1 })).toThrow(RangeError);
    expect(() => solveEwmaL({ lambda: 0.2, targetArl: Number.NaN })).toThrow(RangeError);
  });

  it('keeps each ARL evaluation to a few milliseconds', () => {
    const started = performance.now();
    for (let i = 0; i < 20; i++) cusumArl({ k: 0.5, h: 4 + i / 100, shift: 0.5 });
    for (let i = 0; i < 20; i++) ewmaArl({ lambda: 0.2, L: 2.9 + i / 100, shift: 0.5 });
    // Generous bound so a slow machine does not fail; typical is about 2 ms per call.
    expect((performance.now() - started) / 40).toBeLessThan(25);
  });
});
