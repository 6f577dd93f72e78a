import { readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import {
  createEwma,
  ewmaAsymptoticLimits,
  ewmaSignal,
  ewmaUpdate,
  type EwmaSettings,
  type EwmaState,
} from './ewma.js';

function readNistEwma(): { sample: number; x: number; ewma: number }[] {
  const url = new URL(
    '../../../test/fixtures/reference/nist-6.3.2.4-ewma-example.csv',
    import.meta.url,
  );
  const lines = readFileSync(url, 'utf8').trim().split('\n').slice(1);
  return lines.map((line) => {
    const [sample, x, ewma] = line.split(',').map(Number);
    return { sample: sample ?? NaN, x: x ?? NaN, ewma: ewma ?? NaN };
  });
}

describe('EWMA against the NIST/SEMATECH e-Handbook §6.3.2.4 example', () => {
  // NIST §6.3.2.4: EWMA0 = target = 50, s = 2.0539, λ = 0.3, k = L = 3.
  const settings: EwmaSettings = { target: 50, sigma: 2.0539, lambda: 0.3, L: 3 };

  it('has asymptotic limits 47.4115 and 52.5884', () => {
    const limits = ewmaAsymptoticLimits(settings);
    // NIST §6.3.2.4 prints UCL = 52.5884, LCL = 47.4115 (from the rounded factor 0.4201).
    expect(Math.abs(limits.upper - 52.5884)).toBeLessThan(2e-4);
    expect(Math.abs(limits.lower - 47.4115)).toBeLessThan(2e-4);
  });

  it('reproduces the printed EWMA series (2 decimals) and stays in control', () => {
    const rows = readNistEwma();
    expect(rows).toHaveLength(20);
    const state = createEwma(settings);
    for (const row of rows) {
      ewmaUpdate(state, row.x);
      // NIST §6.3.2.4 EWMA column, printed to 2 decimals.
      expect(Math.abs(state.z - row.ewma), `sample ${row.sample}`).toBeLessThanOrEqual(
        0.005 + 1e-9,
      );
      // NIST §6.3.2.4: every EWMA value lies between the control limits.
      expect(ewmaSignal(state), `sample ${row.sample}`).toBeNull();
    }
    expect(state.signalAt).toBeNull();
  });
});

describe('EWMA limits and state', () => {
  const settings: EwmaSettings = { target: 100, sigma: 4, lambda: 0.2, L: 2.962 };

  it('widens the limits as σ√(λ/(2−λ)(1−(1−λ)^{2n})) towards the asymptotic limits', () => {
    const state = createEwma(settings);
    expect(state.upperLimit).toBe(100);
    const asymptotic = ewmaAsymptoticLimits(settings);
    for (let n = 1; n <= 200; n++) {
      ewmaUpdate(state, 100);
      // Closed form recomputed with Math.pow, independent of the carried decay factor.
      const half = 2.962 * 4 * Math.sqrt((0.2 / 1.8) * (1 - Math.pow(0.8, 2 * n)));
      expect(state.upperLimit).toBeCloseTo(100 + half, 10);
      expect(state.lowerLimit).toBeCloseTo(100 - half, 10);
    }
    expect(state.upperLimit).toBeCloseTo(asymptotic.upper, 10);
    // At n = 1, 1 − (1−λ)² = λ(2−λ), so the band is exactly L σ λ on each side.
    const first = ewmaUpdate(createEwma(settings), 100);
    expect(first.upperLimit - 100).toBeCloseTo(2.962 * 4 * 0.2, 12);
  });

  it('with λ = 1 follows the data and has Shewhart L σ limits', () => {
    const state = createEwma({ target: 0, sigma: 1, lambda: 1, L: 3 });
    ewmaUpdate(state, 2.5);
    expect(state.z).toBe(2.5);
    expect(state.upperLimit).toBeCloseTo(3, 12);
    ewmaUpdate(state, -3.5);
    expect(ewmaSignal(state)).toBe('lower');
    expect(state.signalAt).toBe(2);
  });

  it('signals a sustained upward shift and records the first signal', () => {
    const state = createEwma(settings);
    for (let i = 0; i < 10; i++) ewmaUpdate(state, 100);
    for (let i = 0; i < 10; i++) ewmaUpdate(state, 110);
    expect(ewmaSignal(state)).toBe('upper');
    // EWMA after the shifted samples: 102, 103.6, 104.88; the limit is about 103.94 by then.
    expect(state.signalAt).toBe(13);
  });

  it('gives the same later results after a JSON round trip mid-stream', () => {
    const xs = Array.from({ length: 80 }, (_, i) => 100 + 6 * Math.sin(i * 1.7) + (i > 50 ? 5 : 0));
    const straight = createEwma(settings);
    for (const x of xs) ewmaUpdate(straight, x);
    const half = createEwma(settings);
    for (const x of xs.slice(0, 40)) ewmaUpdate(half, x);
    const restored = JSON.parse(JSON.stringify(half)) as EwmaState;
    for (const x of xs.slice(40)) ewmaUpdate(restored, x);
    expect(restored).toEqual(straight);
  });

  it('skips non-finite samples', () => {
    const state = createEwma(settings);
    ewmaUpdate(state, Number.NaN);
    expect(state.n).toBe(0);
    expect(state.z).toBe(100);
  });

  it('rejects impossible settings with RangeError', () => {
    expect(() => createEwma({ ...settings, sigma: 0 })).toThrow(RangeError);
    expect(() => createEwma({ ...settings, lambda: 0 })).toThrow(RangeError);
    expect(() => createEwma({ ...settings, lambda: 1.5 })).toThrow(RangeError);
    expect(() => createEwma({ ...settings, L: -1 })).toThrow(RangeError);
    expect(() => ewmaAsymptoticLimits({ ...settings, target: Number.NaN })).toThrow(RangeError);
  });
});
