import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import { looksLikeIsoTime, parseIsoTime } from './iso-time.js';

describe('parseIsoTime', () => {
  it('reads a time without a zone as UTC and honours a given zone', () => {
    expect(parseIsoTime('2026-03-01T00:00:00Z')).toBe(Date.UTC(2026, 2, 1));
    expect(parseIsoTime('2026-03-01 01:00')).toBe(Date.UTC(2026, 2, 1, 1));
    expect(parseIsoTime('2026-03-01T03:00:00+01:00')).toBe(Date.UTC(2026, 2, 1, 2));
    expect(parseIsoTime('2026-03-01T03:00:00+0100')).toBe(Date.UTC(2026, 2, 1, 2));
    expect(parseIsoTime('2026-03-01T03:00:00-05:30')).toBe(Date.UTC(2026, 2, 1, 8, 30));
    expect(parseIsoTime('2026-03-01')).toBe(Date.UTC(2026, 2, 1));
  });

  it('keeps milliseconds and drops finer fractions', () => {
    expect(parseIsoTime('2026-03-01T00:00:00.5Z')).toBe(Date.UTC(2026, 2, 1) + 500);
    expect(parseIsoTime('2026-03-01T00:00:00.123456789Z')).toBe(Date.UTC(2026, 2, 1) + 123);
  });

  it('refuses moments that do not exist, which Date.parse would roll over', () => {
    expect(Date.parse('2026-02-30T00:00:00Z')).toBe(Date.UTC(2026, 2, 2));
    expect(parseIsoTime('2026-02-30T00:00:00Z')).toBeNaN();
    expect(parseIsoTime('2026-13-01')).toBeNaN();
    expect(parseIsoTime('2026-03-01T24:00:00Z')).toBeNaN();
    expect(parseIsoTime('2026-03-01T12:60Z')).toBeNaN();
    expect(parseIsoTime('2026-03-01T12:00:00+25:00')).toBeNaN();
    expect(parseIsoTime('2025-02-29')).toBeNaN();
    expect(parseIsoTime('2024-02-29')).toBe(Date.UTC(2024, 1, 29));
    expect(parseIsoTime('2100-02-29')).toBeNaN();
    expect(parseIsoTime('2000-02-29')).toBe(Date.UTC(2000, 1, 29));
  });

  it('refuses text that is not written as ISO 8601', () => {
    for (const text of ['', 'yesterday', '2026-3-1', '01/03/2026', '2026-03-01T03:00:00+01']) {
      expect(looksLikeIsoTime(text), text).toBe(false);
      expect(parseIsoTime(text), text).toBeNaN();
    }
    expect(looksLikeIsoTime('2026-02-30')).toBe(true);
  });

  it('agrees with Date for every real moment of years 0 to 9999', () => {
    fc.assert(
      fc.property(
        fc.date({
          // A day inside each end, so the local time under any offset still has a 4-digit year.
          min: new Date('0000-01-02T00:00:00Z'),
          max: new Date('9999-12-30T23:59:59.999Z'),
          noInvalidDate: true,
        }),
        fc.integer({ min: -14 * 60, max: 14 * 60 }),
        (date, offset) => {
          const local = new Date(date.getTime() + offset * 60_000).toISOString();
          const sign = offset < 0 ? '-' : '+';
          const abs = Math.abs(offset);
          const zone = `${sign}${String(Math.floor(abs / 60)).padStart(2, '0')}:${String(abs % 60).padStart(2, '0')}`;
          expect(parseIsoTime(local.replace('Z', zone))).toBe(date.getTime());
        },
      ),
    );
  });
});
