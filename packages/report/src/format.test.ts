import { describe, expect, it } from 'vitest';
import {
  escapeHtml,
  formatNumber,
  formatP,
  formatPercent,
  formatSigned,
  formatTime,
} from './format.js';

describe('formatting for people', () => {
  it('writes numbers to significant figures with a true minus sign', () => {
    expect(formatNumber(2.39612)).toBe('2.396');
    expect(formatNumber(-0.18473)).toBe('−0.1847');
    expect(formatNumber(123456.7)).toBe('123500');
    expect(formatNumber(0.000012346)).toBe('1.235e-5');
    expect(formatNumber(Number.NaN)).toBe('–');
    expect(formatNumber(null)).toBe('–');
    expect(formatSigned(0.25)).toBe('+0.25');
    expect(formatSigned(-0.25)).toBe('−0.25');
  });

  it('writes shares and p-values as they are quoted', () => {
    expect(formatPercent(0.05)).toBe('5%');
    expect(formatPercent(0.0092)).toBe('0.92%');
    expect(formatPercent(0.95)).toBe('95%');
    expect(formatPercent(0.123)).toBe('12.3%');
    expect(formatPercent(0)).toBe('0%');
    expect(formatP(0.0312)).toBe('0.031');
    expect(formatP(3e-9)).toBe('< 0.0001');
  });

  it('writes times in UTC to the minute, and escapes markup', () => {
    expect(formatTime(Date.UTC(2026, 5, 1, 6, 5, 59))).toBe('2026-06-01 06:05 UTC');
    expect(escapeHtml(`<a href="x">Tom's & Jerry's</a>`)).toBe(
      '&lt;a href=&quot;x&quot;&gt;Tom&#39;s &amp; Jerry&#39;s&lt;/a&gt;',
    );
  });
});
