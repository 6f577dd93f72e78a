import { ar1Series, cusumArl, seededRandom } from '@trueshift/stats';
import { describe, expect, it } from 'vitest';
import { chartDesign } from './chart-design.js';
import { createWatch, watchConfigure, watchRebaseline, watchUpdate } from './watch.js';
import type { UnmarkedShift, WatchSettings, WatchState } from './watch.js';

const design = chartDesign({ k: 0.5, lambda: 0.2, targetArl: 500 });
const settings: WatchSettings = {
  k: design.k,
  h: design.h,
  lambda: design.lambda,
  L: design.L,
  minHistory: 30,
  baselineSize: 200,
};

function run(state: WatchState, values: ArrayLike<number>, t0 = 0): UnmarkedShift[] {
  const events: UnmarkedShift[] = [];
  for (let i = 0; i < values.length; i++) {
    const event = watchUpdate(state, t0 + i, values[i] ?? Number.NaN);
    if (event !== null) events.push(event);
  }
  return events;
}

describe('the watch without a mark', () => {
  it('learns a baseline from the first minHistory values before it watches', () => {
    const random = seededRandom(1);
    const state = createWatch(settings);
    run(
      state,
      Array.from({ length: 29 }, () => 5 + random.normal()),
    );
    expect(state.baseline).toBeNull();
    expect(state.cusum).toBeNull();
    watchUpdate(state, 29, 5);
    expect(state.baseline?.n).toBe(30);
    expect(state.cusum?.settings.target).toBe(state.baseline?.mean);
    // Provisional: refined once from baselineSize values.
    expect(state.learning).toHaveLength(30);
    run(
      state,
      Array.from({ length: 170 }, () => 5 + random.normal()),
      30,
    );
    expect(state.baseline?.n).toBe(200);
    expect(state.learning).toEqual([]);
    expect(state.cusum?.settings.target).toBe(state.baseline?.mean);
    expect(state.cusum?.n).toBe(0);
  });

  it('starts at once from a seed history, using its latest baselineSize values', () => {
    const seed = Array.from({ length: 500 }, (_, i) => (i < 300 ? 100 : 0) + (i % 2));
    const state = createWatch(settings, seed);
    expect(state.baseline?.n).toBe(200);
    expect(state.baseline?.mean).toBeCloseTo(0.5, 12);
  });

  it('catches a 2σ step near its true start, with the new level and side, then the return', () => {
    const random = seededRandom(2);
    const values = Array.from(
      { length: 600 },
      (_, i) => 50 + (i >= 300 && i < 450 ? 2 : 0) + random.normal(),
    );
    const state = createWatch(settings, values.slice(0, 200));
    const events = run(state, values.slice(200), 200);
    const up = events.find((e) => e.side === 'rise' && e.signalTime >= 300);
    const down = events.find((e) => e.side === 'fall' && e.signalTime >= 450);
    // A 2σ shift with k = 0.5 and h ≈ 5.07 signals after about 4 values on average (cusumArl).
    expect(cusumArl({ k: 0.5, h: settings.h, shift: 2 })).toBeLessThan(5);
    expect(up?.signalTime).toBeLessThan(315);
    // The estimate of the start leans early when the noise just before the step was high.
    expect(Math.abs((up?.changeTime ?? 0) - 300)).toBeLessThanOrEqual(8);
    // The level at the signal rests on the few values of the run: about ±σ/√4 around 52.
    expect(up?.newLevel).toBeGreaterThan(51);
    expect(up?.newLevel).toBeLessThan(53);
    expect(down?.signalTime).toBeLessThan(470);
    expect(Math.abs((down?.changeTime ?? 0) - 450)).toBeLessThanOrEqual(5);
    expect(down?.number).toBeGreaterThan(up?.number ?? Infinity);
  });

  it('finds the step and its change point across many seeded runs', () => {
    // Over 100 runs: a 2σ step must be caught within 15 values (the run length at 2σ averages about
    // 4 and rarely passes 10) unless a false alarm just before it left the watch re-learning, and the change-point estimate should sit on the true start in the
    // typical run. The return is caught once the new level is re-learnt (30 values after the
    // signal). False alarms elsewhere are allowed: about 0.7 are expected per run at ARL 500.
    let caught = 0;
    let returned = 0;
    const errors: number[] = [];
    for (let seed = 100; seed < 200; seed++) {
      const random = seededRandom(seed);
      const values = Array.from(
        { length: 600 },
        (_, i) => 50 + (i >= 300 && i < 450 ? 2 : 0) + random.normal(),
      );
      const state = createWatch(settings, values.slice(0, 200));
      const events = run(state, values.slice(200), 200);
      const up = events.find((e) => e.side === 'rise' && e.signalTime >= 300);
      if (up !== undefined && up.signalTime < 315) {
        caught += 1;
        errors.push(Math.abs(up.changeTime - 300));
      }
      if (events.some((e) => e.side === 'fall' && e.signalTime >= 450 && e.signalTime < 480)) {
        returned += 1;
      }
    }
    errors.sort((a, b) => a - b);
    expect(caught).toBeGreaterThanOrEqual(90);
    expect(returned).toBeGreaterThanOrEqual(90);
    expect(errors[errors.length >> 1]).toBeLessThanOrEqual(2);
  });

  it('has about the design ARL in control when the baseline is right', () => {
    // With the true mean and sigma the run length to a false signal averages the Markov-chain ARL
    // (500 by design). Run lengths are roughly geometric, so their SD is about the ARL itself and
    // the mean of 300 runs has a standard error of about 500 / √300 ≈ 29; ±4 standard errors.
    const random = seededRandom(3);
    const runs = 300;
    let total = 0;
    for (let r = 0; r < runs; r++) {
      const state = createWatch(settings, [0, 1, 0, 1]);
      watchRebaseline(state, 0, 1);
      let n = 0;
      while (n < 20_000) {
        n += 1;
        if (watchUpdate(state, n, random.normal()) !== null) break;
      }
      total += n;
    }
    const mean = total / runs;
    expect(mean).toBeGreaterThan(500 - 4 * 29);
    expect(mean).toBeLessThan(500 + 4 * 29);
  });

  it('goes on after a JSON round trip exactly as without one', () => {
    const random = seededRandom(4);
    const values = Array.from({ length: 400 }, (_, i) => (i > 250 ? 1.5 : 0) + random.normal());
    const straight = createWatch(settings);
    const straightEvents = run(straight, values);
    let restarted = createWatch(settings);
    const firstEvents = run(restarted, values.slice(0, 260));
    restarted = JSON.parse(JSON.stringify(restarted)) as WatchState;
    const laterEvents = run(restarted, values.slice(260), 260);
    expect([...firstEvents, ...laterEvents]).toEqual(straightEvents);
    expect(restarted).toEqual(straight);
  });

  it('moves to a new level on rebaseline and restarts on new settings', () => {
    const state = createWatch(settings, [1, 2, 1, 2, 1, 2, 1, 2, 1, 2]);
    expect(state.baseline).toBeNull();
    // Without a baseline there is no sigma to keep, so a rebaseline leaves it learning.
    watchRebaseline(state, 7);
    expect(state.baseline).toBeNull();
    const seeded = createWatch(
      settings,
      Array.from({ length: 40 }, (_, i) => i % 3),
    );
    const sigma = seeded.baseline?.sigma;
    watchRebaseline(seeded, 7);
    expect(seeded.cusum?.settings.target).toBe(7);
    expect(seeded.baseline?.sigma).toBe(sigma);
    expect(watchConfigure(seeded, { ...settings })).toBe(false);
    expect(watchConfigure(seeded, { ...settings, h: 4 })).toBe(true);
    expect(seeded.cusum?.settings.h).toBe(4);
    expect(seeded.cusum?.settings.target).toBe(7);
  });

  it('ignores values that are not finite', () => {
    const state = createWatch(
      settings,
      Array.from({ length: 40 }, (_, i) => i % 3),
    );
    expect(watchUpdate(state, 1, Number.NaN)).toBeNull();
    expect(state.n).toBe(0);
  });
});

describe('the watch on an autocorrelated tag (AR(1) residual mode)', () => {
  // A long design ARL, as a plant would run the unmarked watch, so false alarms within 2,000 values
  // should be rare: with known mean and sigma, 1 − (1 − 1/20,000)^2000 ≈ 9.5% of runs.
  const quiet = chartDesign({ k: 0.5, lambda: 0.2, targetArl: 20_000 });
  const quietSettings: WatchSettings = {
    k: quiet.k,
    h: quiet.h,
    lambda: quiet.lambda,
    L: quiet.L,
    minHistory: 30,
    baselineSize: 300,
  };

  /** Share of seeded runs (300-value baseline, then 2,000 in control) with any unmarked shift. */
  function falseAlarmShare(phi: number, residuals: boolean): { share: number; modeShare: number } {
    let alarms = 0;
    let residualRuns = 0;
    const runs = 100;
    for (let seed = 1; seed <= runs; seed++) {
      const x = ar1Series(seededRandom(seed), 2300, 50, 1, phi);
      const state = createWatch({ ...quietSettings, residuals }, x.subarray(0, 300));
      if (state.phi !== null) residualRuns += 1;
      for (let i = 300; i < x.length; i++) {
        if (watchUpdate(state, i, x[i] ?? Number.NaN) !== null) {
          alarms += 1;
          break;
        }
      }
    }
    return { share: alarms / runs, modeShare: residualRuns / runs };
  }

  it('keeps false alarms near the design rate at φ = 0.5, far below charting the raw values', () => {
    const independent = falseAlarmShare(0, true);
    const after = falseAlarmShare(0.5, true);
    const before = falseAlarmShare(0.5, false);
    // A baseline estimated from 300 values about doubles the 9.5% of known parameters even on
    // independent data (sigma from 300 moving ranges is off by several percent, and h ≈ 8.7 is
    // steep in sigma): 24 of these 100 runs (18.5% over 200 seeds). Residual mode should land at
    // that rate (25 of 100 here); 35% is about 0.2 plus three binomial standard errors of 100 runs
    // (√(0.2 · 0.8 / 100) = 0.04), well clear of the raw-value rate below.
    expect(independent.share).toBeLessThan(0.35);
    expect(after.modeShare).toBe(1);
    expect(after.share).toBeLessThan(0.35);
    // Raw values: the moving-range sigma understates the AR(1) sigma by √(1 − φ) ≈ 0.71 and the
    // correlated deviations pile up, so almost every run alarms (100 of 100 on these seeds).
    expect(before.modeShare).toBe(0);
    expect(before.share).toBeGreaterThan(0.9);
  });

  it('still catches a 2σ step, with its change point and the new level in tag units', () => {
    let caught = 0;
    const changeErrors: number[] = [];
    const levelErrors: number[] = [];
    for (let seed = 300; seed < 350; seed++) {
      const x = ar1Series(seededRandom(seed), 700, 50, 1, 0.5);
      for (let i = 500; i < x.length; i++) x[i] = (x[i] ?? 0) + 2;
      const state = createWatch(quietSettings, x.subarray(0, 300));
      const events = run(state, x.subarray(300), 300);
      const up = events.find((e) => e.side === 'rise' && e.signalTime >= 500);
      if (up === undefined || up.signalTime >= 540) continue;
      caught += 1;
      expect(up.residuals).toBe(true);
      expect(up.phi).toBeGreaterThan(0.3);
      changeErrors.push(Math.abs(up.changeTime - 500));
      levelErrors.push(Math.abs(up.newLevel - 52));
    }
    changeErrors.sort((a, b) => a - b);
    levelErrors.sort((a, b) => a - b);
    const median = (xs: number[]): number => xs[xs.length >> 1] ?? Infinity;
    // The step is 2 process σ, about 1.15 residual σ after its first value (δ(1 − φ) / √(1 − φ²)),
    // so at h ≈ 8.7 the signal takes some tens of values; 40 is generous.
    expect(caught).toBeGreaterThanOrEqual(45);
    expect(median(changeErrors)).toBeLessThanOrEqual(5);
    // Without the 1 / (1 − φ) conversion the level would read about 51 (half the step).
    expect(median(levelErrors)).toBeLessThan(0.6);
  });

  it('leaves independent data on the raw values, exactly as before', () => {
    let residualRuns = 0;
    for (let seed = 400; seed < 440; seed++) {
      const random = seededRandom(seed);
      const x = Array.from({ length: 800 }, (_, i) => 50 + (i >= 600 ? 2 : 0) + random.normal());
      const auto = createWatch(settings, x.slice(0, 200));
      const raw = createWatch({ ...settings, residuals: false }, x.slice(0, 200));
      if (auto.phi !== null) {
        // r1 of independent values passes 2/√N by chance in about 2.5% of histories (one side).
        residualRuns += 1;
        continue;
      }
      const autoEvents = run(auto, x.slice(200), 200);
      expect(autoEvents).toEqual(run(raw, x.slice(200), 200));
      expect(autoEvents.every((e) => !e.residuals && e.phi === null)).toBe(true);
    }
    expect(residualRuns).toBeLessThanOrEqual(3);
  });

  it('loads a state persisted before residual mode as a raw-value watch', () => {
    const x = ar1Series(seededRandom(5), 400, 10, 1, 0.5);
    const state = createWatch(settings, x.subarray(0, 200));
    expect(state.phi).not.toBeNull();
    const old = JSON.parse(JSON.stringify(state)) as WatchState;
    delete old.phi;
    delete old.residualSigma;
    delete old.previous;
    watchRebaseline(old, old.baseline?.mean ?? 0);
    expect(old.cusum?.settings.target).toBe(old.baseline?.mean);
    run(old, x.subarray(200), 200);
    expect(old.cusum?.settings.target).not.toBe(0);
    expect(old.previous).toBe(x[399]);
  });
});
