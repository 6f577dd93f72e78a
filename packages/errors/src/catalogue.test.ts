import { describe, expect, it } from 'vitest';
import { errorCatalogue, isTrueshiftError, TrueshiftError } from './catalogue.js';

describe('error catalogue', () => {
  it('gives every code a message and an HTTP error status', () => {
    for (const [code, entry] of Object.entries(errorCatalogue)) {
      expect(entry.message.length, code).toBeGreaterThan(10);
      expect(entry.status, code).toBeGreaterThanOrEqual(400);
      expect(entry.status, code).toBeLessThan(600);
    }
  });

  it('builds an error that carries its code, status and detail', () => {
    const error = new TrueshiftError('CSV_BAD_ROW', 'Line 7: the value "abc" is not a number.');
    expect(isTrueshiftError(error)).toBe(true);
    expect(error.status).toBe(400);
    expect(error.message).toContain('Line 7');
    expect(error.toBody()).toEqual({
      code: 'CSV_BAD_ROW',
      message: errorCatalogue.CSV_BAD_ROW.message,
      detail: 'Line 7: the value "abc" is not a number.',
    });
  });
});
