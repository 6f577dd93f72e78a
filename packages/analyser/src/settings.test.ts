import { describe, expect, it } from 'vitest';
import { ANALYSER_DEFAULTS, basisOf, formatPeriod, resolveTagSettings } from './settings.js';

describe('resolveTagSettings', () => {
  it('takes the tag over the service over the project defaults', () => {
    const resolved = resolveTagSettings(
      { riskLevel: 0.01, kind: 'continuous' },
      { riskLevel: 0.1, alertAfter: 5 },
    );
    expect(resolved.riskLevel).toBe(0.01);
    expect(resolved.kind).toBe('continuous');
    expect(resolved.alertAfter).toBe(5);
    expect(resolved.nBefore).toBe(ANALYSER_DEFAULTS.nBefore);
  });

  it('lists every problem at once', () => {
    expect(() => resolveTagSettings({ riskLevel: 2, nBefore: 0, periodMs: 1.5 })).toThrow(
      /periodMs.*riskLevel.*nBefore/,
    );
  });
});

describe('formatPeriod and basisOf', () => {
  it('writes periods the way people do', () => {
    expect(formatPeriod(3_600_000)).toBe('1 h');
    expect(formatPeriod(900_000)).toBe('15 min');
    expect(formatPeriod(90_000)).toBe('90 s');
    expect(formatPeriod(172_800_000)).toBe('2 d');
    expect(formatPeriod(1500)).toBe('1500 ms');
  });

  it('says whether a value is a batch or a period mean', () => {
    expect(basisOf('batch', 60_000)).toBe('batch');
    expect(basisOf('continuous', 600_000)).toBe('period means of 10 min');
  });
});
