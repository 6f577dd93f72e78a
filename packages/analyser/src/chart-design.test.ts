import { cusumArl, ewmaArl } from '@trueshift/stats';
import { describe, expect, it } from 'vitest';
import { chartDesign, chartDesignKey } from './chart-design.js';

describe('chartDesign', () => {
  it('picks h and L that give the target in-control ARL', () => {
    const design = chartDesign({ k: 0.5, lambda: 0.2, targetArl: 500 });
    expect(cusumArl({ k: 0.5, h: design.h, shift: 0 })).toBeCloseTo(500, 3);
    expect(ewmaArl({ lambda: 0.2, L: design.L, shift: 0 })).toBeCloseTo(500, 3);
    // Lucas & Saccucci (1990), as cited in @trueshift/stats evidence.ts (DEFAULT_EWMA): λ = 0.2
    // with L = 2.962 has an in-control ARL of about 500.
    expect(design.L).toBeCloseTo(2.962, 2);
    // Montgomery, ISQC 6th ed., Table 9.3 (from memory, as in @trueshift/stats arl.test.ts): k = 1/2
    // with h = 5 gives a two-sided ARL of 465, so ARL 500 needs an h a little above 5.
    expect(design.h).toBeGreaterThan(5);
    expect(design.h).toBeLessThan(5.2);
  });

  it('keys designs by all three parameters', () => {
    expect(chartDesignKey({ k: 0.5, lambda: 0.2, targetArl: 500 })).not.toBe(
      chartDesignKey({ k: 0.5, lambda: 0.2, targetArl: 370 }),
    );
  });
});
