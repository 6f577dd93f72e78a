import { describe, expect, it } from 'vitest';
import { computeEvidence, defaultBeforeWindow, isVerdict } from './evidence.js';
import { ar1Series, seededRandom } from './random.js';

function shifted(x: Float64Array, by: number): Float64Array {
  return x.map((v) => v + by);
}

describe('computeEvidence', () => {
  const random = seededRandom(2026);
  const history = ar1Series(random, 2000, 100, 2, 0.3);

  it('finds a real 2-sigma rise credible and the CUSUM dates it at the change', () => {
    const after = shifted(ar1Series(random, 30, 100, 2, 0.3), 4);
    const e = computeEvidence({ history, after, direction: 'rise', riskLevel: 0.05, nBefore: 30 });
    expect(e.verdict).toBe('credible-rise');
    expect(e.reference.status).toBe('ok');
    expect(e.observedShift).toBeGreaterThan(2);
    expect(e.welch?.ci.lower).toBeGreaterThan(0);
    expect(e.cusum.signal).toBe('upper');
    expect(e.cusum.change?.changePoint).toBeLessThanOrEqual(3);
    expect(e.cusum.change?.estimatedMean).toBeGreaterThan(102);
    expect(e.ewma.signalAt).not.toBeNull();
    expect(e.samplesNeeded.status).toBe('reached');
    expect(e.verdictText).toMatch(/^The rise is credible/);
  });

  it('keeps gathering on a small early shift and calls a wrong-way shift not credible', () => {
    const early = shifted(ar1Series(random, 4, 100, 2, 0.3), 0.8);
    const gathering = computeEvidence({
      history,
      after: early,
      direction: 'rise',
      riskLevel: 0.05,
      nBefore: 30,
      smallestShift: 1,
    });
    expect(['still-gathering', 'credible-rise', 'credible-but-small']).toContain(gathering.verdict);
    const wrongWay = shifted(ar1Series(random, 30, 100, 2, 0.3), -3);
    const e = computeEvidence({ history, after: wrongWay, direction: 'rise', riskLevel: 0.05 });
    expect(e.verdict).toBe('no-credible-shift');
    expect(e.samplesNeeded.status).toBe('not-reachable');
  });

  it('calls a credible shift smaller than worth having by its name', () => {
    const after = shifted(ar1Series(random, 200, 100, 2, 0.3), 1.5);
    const e = computeEvidence({
      history,
      after,
      direction: 'rise',
      riskLevel: 0.05,
      nBefore: 200,
      smallestShift: 3,
    });
    expect(e.verdict).toBe('credible-but-small');
    expect(e.samplesNeededForSmallest).not.toBeNull();
  });

  it('says when the history cannot resolve the risk level', () => {
    const short = ar1Series(random, 30, 100, 2, 0.3);
    const e = computeEvidence({
      history: short,
      after: ar1Series(random, 10, 100, 2, 0.3),
      direction: 'either',
      riskLevel: 0.01,
      nBefore: 10,
    });
    expect(e.verdict).toBe('not-enough-history');
    expect(e.verdictText).toContain('too short');
  });

  it('caps the after-window and reports what it left out', () => {
    const after = ar1Series(random, 50, 100, 2, 0.3);
    const e = computeEvidence({
      history,
      after,
      direction: 'either',
      riskLevel: 0.05,
      nAfterCap: 20,
    });
    expect(e.nAfter).toBe(20);
    expect(e.nAfterUnused).toBe(30);
    expect(e.after.n).toBe(20);
  });

  it('repeats Welch with effective sizes only when the history is autocorrelated', () => {
    const dependent = ar1Series(random, 2000, 50, 1, 0.7);
    const e = computeEvidence({
      history: dependent,
      after: ar1Series(random, 20, 50, 1, 0.7),
      direction: 'either',
      riskLevel: 0.05,
    });
    expect(e.autocorrelation.flagged).toBe(true);
    expect(e.welchEffective?.effectiveSizes).not.toBeNull();
    // Fewer effective samples widen the standard error.
    expect(e.welchEffective?.standardError ?? 0).toBeGreaterThan(e.welch?.standardError ?? 0);
    const independent = seededRandom(11);
    const iid = Float64Array.from({ length: 400 }, () => independent.normal());
    const f = computeEvidence({
      history: iid,
      after: iid.slice(0, 10),
      direction: 'either',
      riskLevel: 0.05,
    });
    expect(f.autocorrelation.flagged).toBe(false);
    expect(f.welchEffective).toBeNull();
  });

  it('refuses impossible settings', () => {
    const after = new Float64Array([1, 2]);
    expect(() => computeEvidence({ history, after, direction: 'rise', riskLevel: 1 })).toThrow(
      RangeError,
    );
    expect(() =>
      computeEvidence({ history, after: new Float64Array(0), direction: 'rise', riskLevel: 0.05 }),
    ).toThrow(RangeError);
    expect(() =>
      computeEvidence({ history, after, direction: 'rise', riskLevel: 0.05, nBefore: 2.5 }),
    ).toThrow(RangeError);
  });
});

describe('defaultBeforeWindow', () => {
  it('matches the after-window, at least 10, and leaves enough reference differences', () => {
    expect(defaultBeforeWindow(1000, 4, 0.05)).toBe(10);
    expect(defaultBeforeWindow(1000, 40, 0.05)).toBe(40);
    // 60 history samples and 30 after: M = 60 − n_A − 30 + 1 must stay at least 20.
    expect(defaultBeforeWindow(60, 30, 0.05)).toBe(11);
  });
});

describe('isVerdict', () => {
  it('knows every verdict and nothing else', () => {
    expect(isVerdict('credible-fall')).toBe(true);
    expect(isVerdict('no-credible-shift')).toBe(true);
    expect(isVerdict('credible')).toBe(false);
    expect(isVerdict('toString')).toBe(false);
    expect(isVerdict(3)).toBe(false);
  });
});
