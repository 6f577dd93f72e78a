import { cusumArl, seededRandom } from '@trueshift/stats';
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
