import { describe, expect, it } from 'vitest';
import { retryAfterMs, retryDelay } from './back-off.js';

const options = { baseDelayMs: 1000, maxDelayMs: 60_000 };

describe('retryDelay', () => {
  it('doubles the cap with each failure up to the longest delay', () => {
    const top = () => 1;
    expect([1, 2, 3, 4, 5, 6, 7, 8].map((n) => retryDelay(n, options, top))).toEqual([
      1000, 2000, 4000, 8000, 16_000, 32_000, 60_000, 60_000,
    ]);
    // Far past the point where 2^n overflows, the cap still holds.
    expect(retryDelay(5000, options, top)).toBe(60_000);
  });

  it('draws the delay uniformly below the cap (full jitter)', () => {
    expect(retryDelay(3, options, () => 0)).toBe(0);
    expect(retryDelay(3, options, () => 0.5)).toBe(2000);
    const draws = [0.1, 0.35, 0.9].map((r) => retryDelay(4, options, () => r));
    expect(draws).toEqual([800, 2800, 7200]);
  });
});

describe('retryAfterMs', () => {
  const now = Date.UTC(2026, 0, 1, 12, 0, 0);

  it('reads seconds and HTTP dates, and nothing else', () => {
    expect(retryAfterMs('120', now)).toBe(120_000);
    expect(retryAfterMs(' 0 ', now)).toBe(0);
    expect(retryAfterMs('Thu, 01 Jan 2026 12:00:30 GMT', now)).toBe(30_000);
    expect(retryAfterMs('Thu, 01 Jan 2026 11:00:00 GMT', now)).toBe(0);
    expect(retryAfterMs('soon', now)).toBeNull();
    expect(retryAfterMs('-5', now)).toBeNull();
    expect(retryAfterMs(null, now)).toBeNull();
  });
});
