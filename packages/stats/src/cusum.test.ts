import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import {
  createCusum,
  cusumChange,
  cusumReset,
  cusumSignal,
  cusumUpdate,
  type CusumSettings,
  type CusumState,
} from './cusum.js';

interface NistRow {
  group: number;
  x: number;
  upper: number;
  lower: number;
}

function readNistCusum(): NistRow[] {
  const url = new URL(
    '../../../test/fixtures/reference/nist-6.3.2.3-tabular-cusum-example.csv',
    import.meta.url,
  );
  const lines = readFileSync(url, 'utf8').trim().split('\n').slice(1);
  return lines.map((line) => {
    const [group, x, upper, lower] = line.split(',').map(Number);
    return { group: group ?? NaN, x: x ?? NaN, upper: upper ?? NaN, lower: lower ?? NaN };
  });
}

/** Seeded uniform generator (mulberry32) so the synthetic series are the same on every run. */
function mulberry32(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

function normals(seed: number): () => number {
  const u = mulberry32(seed);
  return () => Math.sqrt(-2 * Math.log(1 - u())) * Math.cos(2 * Math.PI * u());
}

function stepSeries(
  seed: number,
  before: number,
  after: number,
  shiftSigmas: number,
): Float64Array {
  const z = normals(seed);
  const out = new Float64Array(before + after);
  for (let i = 0; i < out.length; i++) out[i] = 10 + 2 * (z() + (i >= before ? shiftSigmas : 0));
  return out;
}

function run(state: CusumState, xs: ArrayLike<number>, from = 0, to = xs.length): CusumState {
  for (let i = from; i < to; i++) cusumUpdate(state, xs[i] ?? NaN);
  return state;
}

describe('tabular CUSUM against the NIST/SEMATECH e-Handbook §6.3.2.3 example', () => {
  const rows = readNistCusum();
  // NIST §6.3.2.3: target 325, k = 0.3175 and h = 4.1959 in raw units. σ of the group means is
  // 0.635 (from memory: 1.27 / √4, same page); only kσ and hσ enter the sums.
  const sigma = 0.635;
  const settings: CusumSettings = { target: 325, sigma, k: 0.3175 / sigma, h: 4.1959 / sigma };

  it('reproduces the printed upper and lower sums (2 decimals)', () => {
    expect(rows).toHaveLength(20);
    const state = createCusum(settings);
    for (const row of rows) {
      cusumUpdate(state, row.x);
      // NIST §6.3.2.3 table, sums printed to 2 decimals.
      expect(Math.abs(state.upper * sigma - row.upper), `group ${row.group}`).toBeLessThanOrEqual(
        0.005 + 1e-9,
      );
      expect(Math.abs(state.lower * sigma - row.lower), `group ${row.group}`).toBeLessThanOrEqual(
        0.005 + 1e-9,
      );
    }
  });

  it('signals first on the upper side at group 14, never on the lower side', () => {
    const state = createCusum(settings);
    for (const row of rows) {
      cusumUpdate(state, row.x);
      // NIST §6.3.2.3: the upper sum exceeds h = 4.1959 from group 14 on.
      expect(cusumSignal(state), `group ${row.group}`).toBe(row.group >= 14 ? 'upper' : null);
    }
    expect(state.upperSignalAt).toBe(14);
    expect(state.lowerSignalAt).toBeNull();
  });

  it("estimates the change after group 12 with Montgomery's new-mean formula", () => {
    const state = run(
      createCusum(settings),
      rows.map((r) => r.x),
      0,
      14,
    );
    const change = cusumChange(state);
    // The upper sum was last zero at group 12 (NIST §6.3.2.3 table); C+ = 4.94 after N+ = 2.
    expect(change?.side).toBe('upper');
    expect(change?.changePoint).toBe(12);
    // 325 + 0.3175 + 4.94 / 2 = 327.7875 from the printed table; equals the mean of groups 13-14.
    expect(change?.estimatedMean).toBeCloseTo(327.7875, 3);
    expect(state.upperSum / state.upperRunLength).toBeCloseTo(327.7875, 9);
  });
});

describe('tabular CUSUM state', () => {
  const settings: CusumSettings = { target: 10, sigma: 2, k: 0.5, h: 5 };

  it('gives the same later results after a JSON round trip mid-stream', () => {
    const xs = stepSeries(7, 60, 40, 1);
    const straight = run(createCusum(settings), xs);
    const half = run(createCusum(settings), xs, 0, 50);
    const restored = JSON.parse(JSON.stringify(half)) as CusumState;
    run(restored, xs, 50);
    expect(restored).toEqual(straight);
    expect(cusumChange(restored)).toEqual(cusumChange(straight));
  });

  it('updates in place and returns the same object', () => {
    const state = createCusum(settings);
    expect(cusumUpdate(state, 13)).toBe(state);
    expect(state.n).toBe(1);
    // (13 - 10) / 2 - 0.5 = 1 in σ units.
    expect(state.upper).toBeCloseTo(1, 12);
    expect(state.lower).toBe(0);
  });

  it('skips non-finite samples instead of poisoning the sums', () => {
    const state = run(createCusum(settings), [12, Number.NaN, Number.POSITIVE_INFINITY, 12]);
    expect(state.n).toBe(2);
    expect(state.upper).toBeCloseTo(1, 12);
  });

  it('locates a 1σ step within a few samples and estimates the new mean (seeded series)', () => {
    // Seed 2024, 100 in-control samples then a +1σ step (mean 10 -> 12).
    const xs = stepSeries(2024, 100, 60, 1);
    const state = createCusum(settings);
    let i = 0;
    while (i < xs.length && cusumSignal(state) === null) cusumUpdate(state, xs[i++] ?? NaN);
    expect(state.upperSignalAt).not.toBeNull();
    expect(state.upperSignalAt).toBeGreaterThan(100);
    const change = cusumChange(state);
    expect(change?.side).toBe('upper');
    expect(Math.abs((change?.changePoint ?? 0) - 100)).toBeLessThanOrEqual(5);
    expect(Math.abs((change?.estimatedMean ?? 0) - 12)).toBeLessThan(1.5);
  });

  it('places the change point near a 2σ down-step on average over 200 seeded series', () => {
    let clean = 0;
    const errors: number[] = [];
    for (let seed = 1; seed <= 200; seed++) {
      const xs = stepSeries(seed, 80, 40, -2);
      const state = createCusum(settings);
      let i = 0;
      while (i < xs.length && cusumSignal(state) === null) cusumUpdate(state, xs[i++] ?? NaN);
      // With in-control ARL 465 about one series in six raises a false alarm before the step;
      // those say nothing about locating the step.
      if (i <= 80) continue;
      clean += 1;
      const change = cusumChange(state);
      if (change?.side !== 'lower') continue;
      errors.push(Math.abs(change.changePoint - 80));
    }
    expect(clean).toBeGreaterThan(140);
    // A 2σ step is caught within the 40 shifted samples essentially always (ARL about 4).
    expect(errors).toHaveLength(clean);
    errors.sort((a, b) => a - b);
    // The estimate is the last zero of the sum, so when in-control noise had already lifted the
    // lower sum before the step it lands early; most series still hit the step within a sample.
    expect(errors[Math.floor(errors.length / 2)]).toBeLessThanOrEqual(1);
    expect(errors.filter((e) => e <= 3).length / errors.length).toBeGreaterThan(0.75);
  });

  it('reports the larger sum when both are inside the limits, and null with no evidence', () => {
    const state = createCusum(settings);
    expect(cusumChange(state)).toBeNull();
    run(state, [9, 9, 11.5]);
    // Lower sum: (0.5 - 0.5) = 0 after each 9, so only the last sample moves the upper sum.
    expect(cusumChange(state)?.side).toBe('upper');
    expect(cusumChange(state)?.changePoint).toBe(2);
  });

  it('starts and restarts at the head start (fast initial response)', () => {
    const fir = createCusum({ ...settings, headStart: 2.5 });
    expect(fir.upper).toBe(2.5);
    expect(fir.lower).toBe(2.5);
    const xs = stepSeries(11, 0, 30, 1.5);
    const plain = createCusum(settings);
    let firAt = 0;
    let plainAt = 0;
    for (let i = 0; i < xs.length; i++) {
      cusumUpdate(fir, xs[i] ?? NaN);
      cusumUpdate(plain, xs[i] ?? NaN);
      if (firAt === 0 && cusumSignal(fir) !== null) firAt = i + 1;
      if (plainAt === 0 && cusumSignal(plain) !== null) plainAt = i + 1;
    }
    // A process already off target at start-up is caught no later with the head start.
    expect(firAt).toBeGreaterThan(0);
    expect(firAt).toBeLessThanOrEqual(plainAt);
    cusumReset(fir);
    expect(fir.upper).toBe(2.5);
    expect(fir.upperSignalAt).toBeNull();
    expect(fir.n).toBe(30);
  });

  it('rejects impossible settings with RangeError', () => {
    expect(() => createCusum({ ...settings, sigma: 0 })).toThrow(RangeError);
    expect(() => createCusum({ ...settings, sigma: Number.NaN })).toThrow(RangeError);
    expect(() => createCusum({ ...settings, k: -0.1 })).toThrow(RangeError);
    expect(() => createCusum({ ...settings, h: 0 })).toThrow(RangeError);
    expect(() => createCusum({ ...settings, headStart: 5 })).toThrow(RangeError);
    expect(() => createCusum({ ...settings, target: Number.POSITIVE_INFINITY })).toThrow(
      RangeError,
    );
  });
});
