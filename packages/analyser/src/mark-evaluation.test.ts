import { ar1Series, seededRandom } from '@trueshift/stats';
import type { MarkRecord } from '@trueshift/store';
import { describe, expect, it } from 'vitest';
import {
  createMarkTagState,
  evaluateMark,
  evaluateMarkCatchUp,
  inControlHistory,
  markAddSample,
  markClosePeriod,
  markRebuildAfter,
  markSettings,
  settlingWindows,
} from './mark-evaluation.js';
import type { MarkEvaluation, MarkSettings, MarkTagState } from './mark-evaluation.js';
import { resolveTagSettings } from './settings.js';

function mark(over: Partial<MarkRecord> = {}): MarkRecord {
  return {
    id: 'm1',
    tags: ['yield'],
    at: 1000,
    label: 'new catalyst',
    note: '',
    direction: 'rise',
    smallestShift: null,
    nBefore: null,
    nAfterCap: null,
    riskLevel: null,
    settlingMs: null,
    createdAt: 0,
    updatedAt: 0,
    withdrawnAt: null,
    revision: 1,
    ...over,
  };
}

function settingsFor(m: MarkRecord, over: Parameters<typeof resolveTagSettings>[0] = {}) {
  return markSettings(m, resolveTagSettings(over));
}

/** Feeds batch values one per time step from the mark on, evaluating after each. */
function feed(
  state: MarkTagState,
  settings: MarkSettings,
  history: Float64Array,
  after: ArrayLike<number>,
): MarkEvaluation[] {
  const out: MarkEvaluation[] = [];
  for (let i = 0; i < after.length; i++) {
    if (markAddSample(state, settings, state.at + i, after[i] ?? Number.NaN) === 'settled') break;
    out.push(evaluateMark(state, history, settings));
  }
  return out;
}

describe('inControlHistory', () => {
  it('keeps good values before the mark and leaves out earlier marks’ settling periods', () => {
    const t = [0, 10, 20, 30, 40, 50, 60, 70, 80];
    const v = [1, 2, 3, 4, Number.NaN, 6, 7, 8, 9];
    const marks = [
      mark({ id: 'early', at: 10, settlingMs: 15 }),
      mark({ id: 'withdrawn', at: 50, settlingMs: 100, withdrawnAt: 5 }),
      mark({ id: 'other-tag', at: 0, settlingMs: 100, tags: ['steam'] }),
      mark({ id: 'late', at: 75, settlingMs: 100 }),
      mark({ id: 'self', at: 70, settlingMs: 100 }),
    ];
    const windows = settlingWindows(marks, 'yield', 70, 'self');
    expect(windows).toEqual([{ at: 10, settlingMs: 15 }]);
    const history = inControlHistory(t, v, { markAt: 70, windows, kind: 'batch', periodMs: 1 });
    expect(Array.from(history)).toEqual([1, 4, 6, 7]);
  });

  it('takes period means anchored at the mark for continuous tags', () => {
    const t = [0, 5, 10, 15, 20, 25];
    const v = [1, 3, 5, 7, 9, 11];
    // Periods of 10 ending at the mark (25): [-5, 5), [5, 15), [15, 25).
    const history = inControlHistory(t, v, {
      markAt: 25,
      windows: [],
      kind: 'continuous',
      periodMs: 10,
    });
    expect(Array.from(history)).toEqual([1, 4, 8]);
  });
});

describe('evaluateMark', () => {
  const random = seededRandom(42);
  const history = ar1Series(random, 300, 100, 1, 0);

  it('opens one alert after three consecutive credible evaluations of a 2σ rise, then settles', () => {
    const m = mark();
    const settings = settingsFor(m);
    const state = createMarkTagState(m, 'yield', settings);
    const after = ar1Series(seededRandom(43), 40, 102, 1, 0);
    const evaluations = feed(state, settings, history, after);
    const opened = evaluations.filter((e) => e.openAlert);
    expect(opened).toHaveLength(1);
    const at = evaluations.findIndex((e) => e.openAlert);
    // The three evaluations up to the alert all counted; it opens on the third in a row.
    expect(evaluations.slice(at - 2, at + 1).map((e) => e.consecutive)).toEqual([1, 2, 3]);
    expect(evaluations[at]?.verdict).toBe('credible-rise');
    expect(evaluations[at]?.settledNow).toBe('alert');
    expect(evaluations).toHaveLength(at + 1);
    expect(state.settled).toBe('alert');
    expect(evaluations[at]?.newBaseline).toBeCloseTo(
      Array.from(after.slice(0, at + 1)).reduce((a, b) => a + b, 0) / (at + 1),
      10,
    );
    expect(markAddSample(state, settings, 5000, 1)).toBe('settled');
  });

  it('keeps the before-window fixed as the after-window grows', () => {
    const m = mark({ nBefore: 25 });
    const settings = settingsFor(m);
    const state = createMarkTagState(m, 'yield', settings);
    const evaluations = feed(state, settings, history, ar1Series(seededRandom(44), 30, 100, 1, 0));
    expect(new Set(evaluations.map((e) => e.evidence?.nBefore))).toEqual(new Set([25]));
    expect(evaluations.map((e) => e.nAfter).slice(0, 3)).toEqual([1, 2, 3]);
  });

  it('does not count a shift against the mark’s direction or smaller than worth having', () => {
    const after = ar1Series(seededRandom(45), 40, 102, 1, 0);
    const fall = mark({ direction: 'fall' });
    const fallSettings = settingsFor(fall);
    const fallEvaluations = feed(
      createMarkTagState(fall, 'yield', fallSettings),
      fallSettings,
      history,
      after,
    );
    expect(fallEvaluations.some((e) => e.counts || e.openAlert)).toBe(false);

    const small = mark({ smallestShift: 5 });
    const smallSettings = settingsFor(small);
    const smallEvaluations = feed(
      createMarkTagState(small, 'yield', smallSettings),
      smallSettings,
      history,
      after,
    );
    expect(smallEvaluations.some((e) => e.verdict === 'credible-but-small')).toBe(true);
    expect(smallEvaluations.some((e) => e.counts || e.openAlert)).toBe(false);
  });

  it('resets the count when a verdict falls back, so a flickering verdict opens nothing', () => {
    const m = mark();
    const settings = { ...settingsFor(m), alertAfter: 3 };
    const state = createMarkTagState(m, 'yield', settings);
    // Credible twice, then a low value pulls the after-mean back and the count starts over.
    const after = [104, 104, 90, 104, 104];
    const evaluations = feed(state, settings, history, after);
    expect(evaluations.map((e) => e.consecutive)).toEqual([1, 2, 0, 0, 1]);
    expect(evaluations.some((e) => e.openAlert)).toBe(false);
  });

  it('settles at the cap without an alert when there is no shift', () => {
    const m = mark({ nAfterCap: 20 });
    const settings = settingsFor(m);
    const state = createMarkTagState(m, 'yield', settings);
    const after = ar1Series(seededRandom(46), 30, 100, 1, 0);
    const evaluations = feed(state, settings, history, after);
    expect(evaluations).toHaveLength(20);
    expect(evaluations.some((e) => e.openAlert)).toBe(false);
    expect(evaluations[19]?.settledNow).toBe('cap');
    expect(evaluations[19]?.verdict).toBe('no-credible-shift');
    expect(state.settled).toBe('cap');
  });

  it('says there is not enough history without throwing', () => {
    const m = mark();
    const settings = settingsFor(m);
    const state = createMarkTagState(m, 'yield', settings);
    markAddSample(state, settings, 2000, 5);
    const tiny = evaluateMark(state, Float64Array.of(1), settings);
    expect(tiny.verdict).toBe('not-enough-history');
    expect(tiny.evidence).toBeNull();
    const short = evaluateMark(state, history.slice(0, 40), settings);
    expect(short.verdict).toBe('not-enough-history');
    expect(short.risk).toBeNull();
    expect(() => evaluateMark(createMarkTagState(m, 'yield', settings), history, settings)).toThrow(
      RangeError,
    );
  });

  it('tells back-fill apart and rebuilds the after-window from stored samples', () => {
    const m = mark();
    const settings = settingsFor(m);
    const state = createMarkTagState(m, 'yield', settings);
    expect(markAddSample(state, settings, 999, 1)).toBe('before-mark');
    expect(markAddSample(state, settings, 1010, 1)).toBe('added');
    expect(markAddSample(state, settings, 1005, 2)).toBe('late');
    markRebuildAfter(state, settings, [1000, 1005, 1010], [3, 2, 1]);
    expect(state.after).toEqual([3, 2, 1]);
    expect(state.lastSampleTime).toBe(1010);
    expect(state.pending).toBe(true);
  });

  it('uses period means for continuous tags, closed by a later sample or by the clock', () => {
    const m = mark({ at: 1000 });
    const settings = settingsFor(m, { kind: 'continuous', periodMs: 100 });
    const state = createMarkTagState(m, 'yield', settings);
    expect(state.basis).toBe('period means of 100 ms');
    markAddSample(state, settings, 1000, 1);
    markAddSample(state, settings, 1050, 3);
    expect(state.after).toEqual([]);
    markAddSample(state, settings, 1100, 10);
    expect(state.after).toEqual([2]);
    expect(markClosePeriod(state, settings, 1199)).toBe(false);
    expect(markClosePeriod(state, settings, 1200)).toBe(true);
    expect(state.after).toEqual([2, 10]);
  });

  it('judges a mark set in the past as if its last values had been followed live', () => {
    const m = mark();
    const settings = settingsFor(m);
    const shifted = createMarkTagState(m, 'yield', settings);
    const after = ar1Series(seededRandom(47), 40, 102, 1, 0);
    after.forEach((x, i) => markAddSample(shifted, settings, 1000 + i, x));
    const evaluations = evaluateMarkCatchUp(shifted, history, settings);
    expect(evaluations.map((e) => e.nAfter)).toEqual([38, 39, 40]);
    expect(evaluations.map((e) => e.sampleTime)).toEqual([1037, 1038, 1039]);
    expect(evaluations[2]?.openAlert).toBe(true);

    const capped = { ...settings, nAfterCap: 20 };
    const quiet = createMarkTagState(m, 'yield', capped);
    ar1Series(seededRandom(48), 25, 100, 1, 0).forEach((x, i) =>
      markAddSample(quiet, capped, 1000 + i, x),
    );
    const quietEvaluations = evaluateMarkCatchUp(quiet, history, capped);
    expect(quietEvaluations.map((e) => e.nAfter)).toEqual([18, 19, 20]);
    expect(quietEvaluations.map((e) => e.settledNow)).toEqual([null, null, 'cap']);
    expect(quiet.afterUnused).toBe(5);
    // Once evaluated, it is one evaluation per call again.
    expect(evaluateMarkCatchUp(quiet, history, capped)).toHaveLength(1);
  });

  it('judges values that arrive together as one look each, so batching cannot hold an alert back', () => {
    const m = mark();
    const settings = settingsFor(m);
    const state = createMarkTagState(m, 'yield', settings);
    const after = ar1Series(seededRandom(49), 12, 102, 1, 0);
    markAddSample(state, settings, 1000, after[0] ?? 0);
    expect(evaluateMarkCatchUp(state, history, settings)).toHaveLength(1);
    // The other eleven arrive in one batch (a back-log after a restart or a takeover): the last
    // alertAfter of them are judged in turn, as they would have been one by one.
    after.slice(1).forEach((x, i) => markAddSample(state, settings, 1001 + i, x));
    const burst = evaluateMarkCatchUp(state, history, settings);
    expect(burst.map((e) => e.nAfter)).toEqual([10, 11, 12]);
    expect(burst.map((e) => e.number)).toEqual([2, 3, 4]);
    expect(burst.at(-1)?.openAlert).toBe(true);

    // A state saved before the window size at the last look was kept takes one look, as before.
    const older = createMarkTagState(m, 'yield', settings);
    markAddSample(older, settings, 1000, 102);
    evaluateMarkCatchUp(older, history, settings);
    delete older.evaluatedSize;
    markAddSample(older, settings, 1001, 102);
    markAddSample(older, settings, 1002, 102);
    expect(evaluateMarkCatchUp(older, history, settings)).toHaveLength(1);
  });

  it('survives a JSON round trip', () => {
    const m = mark();
    const settings = settingsFor(m);
    const state = createMarkTagState(m, 'yield', settings);
    feed(state, settings, history, [101, 102]);
    const copy = JSON.parse(JSON.stringify(state)) as MarkTagState;
    expect(copy).toEqual(state);
    markAddSample(state, settings, 2000, 103);
    markAddSample(copy, settings, 2000, 103);
    expect(evaluateMark(copy, history, settings)).toEqual(evaluateMark(state, history, settings));
  });
});
