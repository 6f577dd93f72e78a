import { describe, expect, it } from 'vitest';
import { TrueshiftError } from '@trueshift/errors';
import { asUnavailable, isUnavailable } from './unavailable.js';

function withCode(code: string, message = 'failed'): Error {
  return Object.assign(new Error(message), { code });
}

describe('isUnavailable', () => {
  it('counts lost connections, read-only servers, full disks and shutdowns as unavailable', () => {
    for (const code of [
      'ECONNREFUSED',
      'ECONNRESET',
      '08006',
      '08001',
      '25006',
      '53100',
      '57P01',
    ]) {
      expect(isUnavailable(withCode(code))).toBe(true);
    }
    expect(isUnavailable(new Error('Connection terminated unexpectedly'))).toBe(true);
  });

  it('leaves errors of the write itself alone: retrying them would fail the same way', () => {
    // unique violation, check violation, invalid text for a type
    for (const code of ['23505', '23514', '22P02']) {
      expect(isUnavailable(withCode(code))).toBe(false);
    }
    expect(isUnavailable('not an error')).toBe(false);
  });

  it('wraps only the unavailable ones, keeping the cause', () => {
    const refused = withCode('ECONNREFUSED', 'connect ECONNREFUSED 127.0.0.1:5432');
    const wrapped = asUnavailable(refused, 'writing samples');
    expect(wrapped).toBeInstanceOf(TrueshiftError);
    expect((wrapped as TrueshiftError).code).toBe('STORE_UNAVAILABLE');
    expect((wrapped as TrueshiftError).cause).toBe(refused);
    const invalid = withCode('22P02');
    expect(asUnavailable(invalid, 'writing samples')).toBe(invalid);
  });
});
