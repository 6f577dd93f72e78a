import { TrueshiftError } from '@trueshift/errors';
import { parseIsoTime } from '@trueshift/formats';

/** A number option checked against its rule; undefined when it was not given. */
export function numberOption(
  value: string | undefined,
  name: string,
  check: (x: number) => boolean,
  rule: string,
): number | undefined {
  if (value === undefined) return undefined;
  const parsed = Number(value);
  if (value.trim() === '' || !Number.isFinite(parsed) || !check(parsed)) {
    throw new TrueshiftError('INVALID_ARGUMENT', `--${name} must be ${rule}; got "${value}".`);
  }
  return parsed;
}

export const positiveInteger = (x: number): boolean => Number.isInteger(x) && x >= 1;
export const positive = (x: number): boolean => x > 0;
export const riskLevel = (x: number): boolean => x > 0 && x < 1;

/** A text option that must be there and not blank. */
export function requiredText(value: string | undefined, name: string, what: string): string {
  const text = value?.trim() ?? '';
  if (text === '') throw new TrueshiftError('INVALID_ARGUMENT', `--${name} is required: ${what}.`);
  return text;
}

export function maxLength(value: string, name: string, limit: number): string {
  if (value.length > limit) {
    throw new TrueshiftError(
      'INVALID_ARGUMENT',
      `--${name} is ${value.length} characters long; at most ${limit} are allowed.`,
    );
  }
  return value;
}

/**
 * A moment as people type it: ISO 8601 (read as UTC without a zone, like every time trueshift
 * reads) or epoch milliseconds.
 */
export function timeOption(value: string, name: string): number {
  const text = value.trim();
  const t = /^\d{10,}$/.test(text) ? Number(text) : parseIsoTime(text);
  if (!Number.isFinite(t)) {
    throw new TrueshiftError(
      'INVALID_ARGUMENT',
      `--${name} must be an ISO 8601 time such as 2026-07-04T06:00Z, or epoch milliseconds; got "${value}".`,
    );
  }
  return t;
}

const DURATION_UNITS: Readonly<Record<string, number>> = {
  ms: 1,
  s: 1000,
  min: 60_000,
  m: 60_000,
  h: 3_600_000,
  d: 86_400_000,
};

/** "90s", "15min", "2h", "1.5d" or plain milliseconds, to milliseconds. */
export function durationOption(value: string, name: string): number {
  const match = /^(\d+(?:\.\d+)?)\s*(ms|s|min|m|h|d)?$/.exec(value.trim());
  const amount = match === null ? Number.NaN : Number(match[1]);
  const unit = DURATION_UNITS[match?.[2] ?? 'ms'] ?? Number.NaN;
  const ms = Math.round(amount * unit);
  if (!Number.isFinite(ms) || ms < 0) {
    throw new TrueshiftError(
      'INVALID_ARGUMENT',
      `--${name} must be a duration such as 30min, 2h or 1d (or milliseconds); got "${value}".`,
    );
  }
  return ms;
}
