import { seededRandom } from '@trueshift/stats';
import { describe, expect, it } from 'vitest';
import {
  createDataQuality,
  dataQualityCheck,
  dataQualitySample,
  outOfRangeEvents,
  usualInterval,
} from './data-quality.js';
import type { DataQualityEvent, DataQualitySettings } from './data-quality.js';

const settings: DataQualitySettings = { staleAfterIntervals: 10, stuckAfter: 20 };

describe('stale', () => {
  it('calls a tag stale after ten usual intervals of silence, once, until a sample arrives', () => {
    const state = createDataQuality();
    // Every 10 s, with one long gap the median ignores.
    const times = [0, 10_000, 20_000, 30_000, 95_000, 105_000, 115_000];
    for (const t of times) dataQualitySample(state, settings, t, Math.sin(t));
    expect(usualInterval(state)).toBe(10_000);
    expect(dataQualityCheck(state, settings, 115_000 + 100_000)).toBeNull();
    const stale = dataQualityCheck(state, settings, 115_000 + 100_001);
    expect(stale).toEqual({
      kind: 'stale',
      lastSampleTime: 115_000,
      usualIntervalMs: 10_000,
      silentForMs: 100_001,
      staleAfterMs: 100_000,
    });
    expect(dataQualityCheck(state, settings, 500_000)).toBeNull();
    expect(dataQualitySample(state, settings, 600_000, 1)).toEqual([
      { kind: 'stale-ended', at: 600_000, silentForMs: 485_000 },
    ]);
    expect(state.stale).toBe(false);
  });

  it('says nothing before the usual interval is known', () => {
    const state = createDataQuality();
    dataQualitySample(state, settings, 0, 1);
    dataQualitySample(state, settings, 1000, 2);
    expect(usualInterval(state)).toBeNull();
    expect(dataQualityCheck(state, settings, 10 ** 9)).toBeNull();
  });
});

describe('stuck', () => {
  function feed(values: number[]): DataQualityEvent[] {
    const state = createDataQuality();
    return values.flatMap((value, i) => dataQualitySample(state, settings, i * 1000, value));
  }

  it('calls a varying tag stuck when one value repeats more than stuckAfter times, and unstuck after', () => {
    const random = seededRandom(5);
    const varying = Array.from({ length: 60 }, () => 80 + random.normal());
    const events = feed([...varying, ...Array<number>(25).fill(81.25), 80.5]);
    expect(events).toEqual([
      { kind: 'stuck', value: 81.25, count: 21, since: 60_000, at: 80_000 },
      { kind: 'stuck-ended', at: 85_000, count: 25 },
    ]);
  });

  it('leaves a tag alone that normally repeats its value', () => {
    // A coarse valve position: mostly 0, now and then 100.
    const coarse = Array.from({ length: 200 }, (_, i) => (i % 40 < 35 ? 0 : 100));
    expect(feed([...coarse, ...Array<number>(50).fill(0)])).toEqual([]);
  });

  it('needs a varying past before calling anything stuck', () => {
    expect(feed(Array<number>(100).fill(3))).toEqual([]);
  });
});

describe('outOfRangeEvents', () => {
  it('counts out-of-range refusals per tag and nothing else', () => {
    const events = outOfRangeEvents([
      { tag: 'a', code: 'VALUE_OUT_OF_RANGE', receivedAt: 30, raw: '999' },
      { tag: 'a', code: 'VALUE_OUT_OF_RANGE', receivedAt: 10, raw: '-5' },
      { tag: 'b', code: 'VALUE_NOT_FINITE', receivedAt: 20, raw: 'NaN' },
      { tag: null, code: 'VALUE_OUT_OF_RANGE', receivedAt: 20, raw: '?' },
      { tag: 'c', code: 'VALUE_OUT_OF_RANGE', receivedAt: 40, raw: '1e9' },
    ]);
    expect(events).toEqual([
      {
        kind: 'out-of-range',
        tag: 'a',
        count: 2,
        firstReceivedAt: 10,
        lastReceivedAt: 30,
        examples: ['999', '-5'],
      },
      {
        kind: 'out-of-range',
        tag: 'c',
        count: 1,
        firstReceivedAt: 40,
        lastReceivedAt: 40,
        examples: ['1e9'],
      },
    ]);
  });
});
