import { TrueshiftError, isTrueshiftError } from '@trueshift/errors';

/** Socket errors of a connection that cannot be made or was lost. */
const NETWORK_ERRORS = new Set([
  'ECONNREFUSED',
  'ECONNRESET',
  'ETIMEDOUT',
  'EPIPE',
  'EHOSTUNREACH',
  'ENETUNREACH',
  'ENOTFOUND',
  'EAI_AGAIN',
]);

/**
 * SQLSTATEs that say the server cannot take a write now, whatever the write: read-only (a standby,
 * or default_transaction_read_only), out of disk or memory, too many connections, shutting down or
 * starting up. Retrying later can succeed, so the caller must not acknowledge the data.
 */
const UNAVAILABLE_STATES = new Set(['25006', '53100', '53200', '53300', '57P01', '57P02', '57P03']);

function codeOf(error: unknown): string | undefined {
  if (typeof error !== 'object' || error === null || !('code' in error)) return undefined;
  const { code } = error;
  return typeof code === 'string' ? code : undefined;
}

/** True when `error` means the database cannot be written now, rather than that the write is wrong. */
export function isUnavailable(error: unknown): boolean {
  const code = codeOf(error);
  if (code !== undefined) {
    // Class 08: connection exceptions.
    if (code.startsWith('08') || UNAVAILABLE_STATES.has(code) || NETWORK_ERRORS.has(code)) {
      return true;
    }
  }
  if (error instanceof Error) {
    // node-postgres reports a connection closed under a query, and a pool that could not hand out a
    // connection in time, with messages and no code.
    return /Connection terminated|connection timeout|timeout exceeded when trying to connect|Client has encountered a connection error/i.test(
      error.message,
    );
  }
  return false;
}

/** `error` as STORE_UNAVAILABLE when it means the database cannot be written now; else unchanged. */
export function asUnavailable(error: unknown, doing: string): unknown {
  if (isTrueshiftError(error) || !isUnavailable(error)) return error;
  const why = error instanceof Error ? error.message : String(error);
  return new TrueshiftError('STORE_UNAVAILABLE', `PostgreSQL, ${doing}: ${why}`, { cause: error });
}
