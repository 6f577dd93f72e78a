import { TrueshiftError } from '@trueshift/errors';

/**
 * Paging cursors are opaque to clients (base64url JSON), so the bound they stand for can change
 * without breaking anyone who stored one; only a cursor this API handed out is accepted back.
 */
export function encodeCursor(kind: string, at: number): string {
  return Buffer.from(JSON.stringify({ k: kind, at }), 'utf8').toString('base64url');
}

export function decodeCursor(kind: string, cursor: string): number {
  let parsed: unknown;
  try {
    parsed = JSON.parse(Buffer.from(cursor, 'base64url').toString('utf8'));
  } catch {
    parsed = null;
  }
  if (
    typeof parsed === 'object' &&
    parsed !== null &&
    'k' in parsed &&
    'at' in parsed &&
    parsed.k === kind &&
    typeof parsed.at === 'number' &&
    Number.isFinite(parsed.at)
  ) {
    return parsed.at;
  }
  throw new TrueshiftError('REQUEST_INVALID', `The cursor is not one this list handed out.`);
}
