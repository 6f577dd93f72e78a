import { describe, expect, it } from 'vitest';
import {
  credibleShiftAlert,
  dataQualityAlert,
  dedupeKeys,
  outOfRangeAlert,
  unmarkedShiftAlert,
} from './alerts.js';
import type { MarkRecord } from '@trueshift/store';
import {
  createMarkTagState,
  evaluateMark,
  markAddSample,
  markSettings,
} from './mark-evaluation.js';
import { resolveTagSettings } from './settings.js';
import type { UnmarkedShift } from './watch.js';

describe('alerts', () => {
  it('keys repeats of one condition alike and different conditions apart', () => {
    expect(dedupeKeys.credible('m1', 'yield')).toBe('credible:m1:yield');
    expect(dedupeKeys.unmarked('yield', 2)).toBe('unmarked:yield:2');
    expect(dedupeKeys.stale('yield')).toBe('stale:yield');
    expect(dedupeKeys.stuck('yield')).not.toBe(dedupeKeys.stale('yield'));
  });

  it('builds an unmarked-shift alert carrying the event', () => {
    const event: UnmarkedShift = {
      kind: 'unmarked-shift',
      number: 3,
      side: 'fall',
      changeTime: Date.UTC(2026, 0, 1),
      signalTime: Date.UTC(2026, 0, 1, 1),
      runLength: 5,
      previousLevel: 10,
      newLevel: 8.123456,
      sigma: 1,
      cusum: { k: 0.5, h: 5, upper: 0, lower: 5.5 },
      ewmaAgrees: true,
      residuals: false,
      phi: null,
      residualSigma: null,
    };
    const alert = unmarkedShiftAlert('steam', event);
    expect(alert).toMatchObject({
      tag: 'steam',
      markId: null,
      kind: 'unmarked-shift',
      dedupeKey: 'unmarked:steam:3',
      at: event.signalTime,
      evidence: event,
    });
    expect(alert.title).toBe(
      'steam: unmarked fall from 10 to about 8.123, starting about 2026-01-01T00:00:00.000Z',
    );
  });

  it('opens alerts for stale and stuck but not for their ends', () => {
    const stale = dataQualityAlert('t', {
      kind: 'stale',
      lastSampleTime: 0,
      usualIntervalMs: 1000,
      silentForMs: 20_000,
      staleAfterMs: 10_000,
    });
    expect(stale).toMatchObject({ kind: 'stale', dedupeKey: 'stale:t', at: 20_000 });
    expect(
      dataQualityAlert('t', { kind: 'stuck', value: 1, count: 21, since: 0, at: 5 }),
    ).toMatchObject({ kind: 'stuck', dedupeKey: 'stuck:t' });
    expect(dataQualityAlert('t', { kind: 'stale-ended', at: 1, silentForMs: 1 })).toBeNull();
    expect(dataQualityAlert('t', { kind: 'stuck-ended', at: 1, count: 30 })).toBeNull();
    expect(
      outOfRangeAlert({
        kind: 'out-of-range',
        tag: 't',
        count: 1,
        firstReceivedAt: 1,
        lastReceivedAt: 1,
        examples: [],
      }).title,
    ).toBe('t: 1 value outside the valid range refused at ingest');
  });

  it('puts the evidence snapshot into a credible-shift alert', () => {
    const mark: MarkRecord = {
      id: 'm1',
      tags: ['yield'],
      at: 100,
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
    };
    const settings = markSettings(mark, resolveTagSettings({}));
    const state = createMarkTagState(mark, 'yield', settings);
    // A history alternating 0 and 1, then an after-value far above it.
    const history = Float64Array.from({ length: 200 }, (_, i) => i % 2);
    markAddSample(state, settings, 199, 3);
    const evaluation = evaluateMark(state, history, settings);
    const alert = credibleShiftAlert(evaluation, mark.label, { id: 7, body: { verdict: 'x' } });
    expect(alert).toMatchObject({
      kind: 'credible-shift',
      markId: 'm1',
      dedupeKey: 'credible:m1:yield',
      at: 199,
      evidence: { snapshotId: 7, verdict: 'x' },
    });
    // Every historical difference of a one-value window from the 30 before is ±0.5 or 0.
    expect(alert.title).toBe(
      `yield: credible rise of 2.5 after "new catalyst" (risk below ${Number((100 / 170).toPrecision(4))}%)`,
    );
  });
});
