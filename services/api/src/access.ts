import { createHash, randomBytes, randomUUID, timingSafeEqual } from 'node:crypto';
import { TrueshiftError } from '@trueshift/errors';
import type { Store, TokenRecord, TokenScope } from '@trueshift/store';

/** What a route asks of its caller; `public` routes answer anyone who reaches the port. */
export type RouteScope = TokenScope | 'public';

export type Caller =
  | { kind: 'token'; id: string; name: string; scopes: readonly TokenScope[] }
  | { kind: 'anonymous' };

/** The prefix makes a leaked token recognisable in logs and secret scanners. */
const TOKEN_PREFIX = 'ts_';
/** 32 random bytes, base64url: 43 characters after the prefix. */
const TOKEN_PATTERN = /^ts_[A-Za-z0-9_-]{43}$/;

export function hashToken(secret: string): string {
  return createHash('sha256').update(secret, 'utf8').digest('hex');
}

/** A new secret and the record to store for it; the secret itself is never stored. */
export function newToken(
  name: string,
  scopes: readonly TokenScope[],
  now: number,
): { secret: string; record: Omit<TokenRecord, 'revokedAt'> } {
  const secret = TOKEN_PREFIX + randomBytes(32).toString('base64url');
  return {
    secret,
    record: {
      id: randomUUID(),
      name,
      hash: hashToken(secret),
      scopes: [...scopes],
      createdAt: now,
    },
  };
}

/**
 * Creates a token in the store and hands back its secret, the only time it is ever shown. Exported
 * so the command line can make the first admin token, which nobody could create over HTTP.
 */
export async function issueToken(
  store: Store,
  name: string,
  scopes: readonly TokenScope[],
  now: number,
): Promise<{ secret: string; token: TokenRecord }> {
  const { secret, record } = newToken(name, scopes, now);
  const token = await store.createToken(record);
  return { secret, token };
}

/** admin covers everything and write covers reading, so one token per person is enough. */
export function grants(scopes: readonly TokenScope[], needed: TokenScope): boolean {
  if (scopes.includes('admin')) return true;
  if (needed === 'read') return scopes.includes('read') || scopes.includes('write');
  return scopes.includes(needed);
}

function bearerOf(header: string | undefined): string | null {
  if (header === undefined) return null;
  const match = /^Bearer[ \t]+(\S+)[ \t]*$/i.exec(header);
  if (match === null) {
    throw new TrueshiftError(
      'UNAUTHORIZED',
      'The Authorization header is not of the form Bearer <token>.',
    );
  }
  return match[1] ?? null;
}

/**
 * The caller behind a request's Authorization header: null when there is none. A header that is
 * present but wrong is refused outright rather than read as anonymous, so a typo in a script is
 * noticed even where anonymous reading is allowed.
 */
export async function identify(store: Store, header: string | undefined): Promise<Caller | null> {
  const secret = bearerOf(header);
  if (secret === null) return null;
  if (!TOKEN_PATTERN.test(secret)) {
    throw new TrueshiftError('UNAUTHORIZED', 'The token is not one trueshift issued.');
  }
  const hash = hashToken(secret);
  const record = await store.findTokenByHash(hash);
  // The store found the row by its hash; comparing again in constant time keeps a backend whose
  // lookup is looser than byte equality (collation, case folding) from letting a near miss in.
  const matches =
    record !== null &&
    record.hash.length === hash.length &&
    timingSafeEqual(Buffer.from(record.hash, 'utf8'), Buffer.from(hash, 'utf8'));
  if (!matches) throw new TrueshiftError('UNAUTHORIZED', 'The token is not known.');
  if (record.revokedAt !== null) {
    throw new TrueshiftError('UNAUTHORIZED', 'The token has been revoked.');
  }
  return { kind: 'token', id: record.id, name: record.name, scopes: record.scopes };
}

/** Throws the error a caller gets for a route of the given scope, or returns when it may pass. */
export function authorize(
  caller: Caller | null,
  needed: RouteScope,
  readWithoutToken: boolean,
): void {
  if (needed === 'public') return;
  if (caller === null || caller.kind === 'anonymous') {
    if (needed === 'read' && readWithoutToken) return;
    throw new TrueshiftError('UNAUTHORIZED', `This route needs a token with the ${needed} scope.`);
  }
  if (!grants(caller.scopes, needed)) {
    throw new TrueshiftError(
      'FORBIDDEN',
      `This route needs the ${needed} scope; the token has ${caller.scopes.join(', ')}.`,
    );
  }
}

/** Who made a change, as mark revisions and acknowledgements record it. */
export function actorOf(caller: Caller | null): string {
  return caller === null || caller.kind === 'anonymous' ? 'anonymous' : `token:${caller.name}`;
}
