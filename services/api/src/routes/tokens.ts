import { Type } from '@sinclair/typebox';
import type { TokenRecord } from '@trueshift/store';
import { issueToken } from '../access.js';
import type { ApiApp, ApiContext } from '../context.js';
import { TokenCreate, TokenView, errors } from '../schemas.js';

/** A token as it may be shown: never its hash, let alone its secret. */
function view(token: TokenRecord): {
  id: string;
  name: string;
  scopes: TokenRecord['scopes'];
  createdAt: number;
  revokedAt: number | null;
} {
  return {
    id: token.id,
    name: token.name,
    scopes: token.scopes,
    createdAt: token.createdAt,
    revokedAt: token.revokedAt,
  };
}

export function tokenRoutes(app: ApiApp, ctx: ApiContext): void {
  const { store, clock } = ctx;

  app.post(
    '/tokens',
    {
      config: { scope: 'admin' },
      schema: {
        summary: 'Create a token; its secret is in this answer and nowhere else, ever',
        tags: ['admin'],
        body: TokenCreate,
        response: {
          201: Type.Object({
            token: TokenView,
            secret: Type.String({ description: 'Send as Authorization: Bearer <secret>' }),
          }),
          ...errors(400, 401, 403, 413, 429),
        },
      },
    },
    async (request, reply) => {
      const { secret, token } = await issueToken(
        store,
        request.body.name,
        request.body.scopes,
        clock(),
      );
      request.log.info({ token: token.id, scopes: token.scopes }, 'token created');
      return reply
        .code(201)
        .header('cache-control', 'no-store')
        .send({ token: view(token), secret });
    },
  );

  app.get(
    '/tokens',
    {
      config: { scope: 'admin' },
      schema: {
        summary: 'Every token, revoked ones included, without secrets',
        tags: ['admin'],
        response: { 200: Type.Object({ tokens: Type.Array(TokenView) }), ...errors(401, 403) },
      },
    },
    async () => ({ tokens: (await store.listTokens()).map(view) }),
  );

  app.delete(
    '/tokens/:id',
    {
      config: { scope: 'admin' },
      schema: {
        summary: 'Revoke a token; requests with it are refused from now on',
        tags: ['admin'],
        params: Type.Object({ id: Type.String({ minLength: 1, maxLength: 100 }) }),
        response: { 200: Type.Object({ token: TokenView }), ...errors(401, 403, 404, 429) },
      },
    },
    async (request) => {
      const token = await store.revokeToken(request.params.id, clock());
      request.log.info({ token: token.id }, 'token revoked');
      return { token: view(token) };
    },
  );
}
