/**
 * Hostile requests on every write route of the API, as a scanner or a careless script sends them:
 * no token, a wrong one, too small a scope, malformed JSON, oversized bodies, wrong types, unknown
 * fields, and path traversal or SQL in the names and ids of the URL. Each gets its 4xx from the
 * catalogue, and the store is exactly as it was: every table is counted before and after.
 * (The well-formed side of these routes, and single refusals, are in api-routes.test.ts.)
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { errorCatalogue } from '@trueshift/errors';
import { startTestApi, T0 } from './helpers/api.js';
import type { TestApi } from './helpers/api.js';

const TRAVERSAL = '../../etc/passwd';
const SQL = `a'; DROP TABLE samples;--`;
const MINUTE = 60_000;

type Scope = 'read' | 'write' | 'admin';

interface Abuse {
  what: string;
  method: 'POST' | 'PATCH' | 'DELETE';
  url: string;
  /** Sent as it is, so malformed JSON reaches the server malformed. */
  payload?: string;
  /** A scope's token, a literal Authorization header, or none. */
  auth: Scope | { header: string } | null;
  status: number;
}

let api: TestApi | undefined;
let markId = '';
let alertId = 0;
let tokenId = '';

beforeAll(async () => {
  api = await startTestApi({
    // Many refusals in a row from one token: the write rate limit is not what this file is about.
    config: { http: { host: '127.0.0.1', port: 0, writeRatePerMinute: 1_000_000 } },
  });
  await api.store.writeSamples(
    Array.from({ length: 40 }, (_, i) => ({
      tag: 'a',
      t: T0 - (40 - i) * MINUTE,
      value: i,
      quality: 192,
      source: 'test',
      receivedAt: T0,
    })),
  );
  markId = (
    await api.store.createMark(
      { tags: ['a'], at: T0 - 10 * MINUTE, label: 'm', direction: 'rise' },
      'test',
      T0,
    )
  ).id;
  alertId = (
    await api.store.raiseAlert(
      {
        tag: 'a',
        markId,
        kind: 'credible-shift',
        dedupeKey: 'abuse',
        title: 'a rose',
        at: T0,
        evidence: {},
      },
      [{ channel: 'webhook', target: 'http://127.0.0.1:9/hook', createdAt: T0 }],
    )
  ).alert.id;
  tokenId = (await api.store.listTokens())[0]?.id ?? '';
});

afterAll(async () => {
  await api?.close();
});

/** Everything a write route could touch, as one comparable value. */
async function snapshot(test: TestApi): Promise<Record<string, unknown>> {
  const { store } = test;
  const marks = await store.listMarks({ includeWithdrawn: true });
  return {
    samples: await store.countSamples(),
    quarantine: await store.countQuarantine(),
    tags: await store.listTags(),
    marks,
    revisions: await Promise.all(marks.map((m) => store.markHistory(m.id))),
    alerts: await store.listAlerts(),
    outbox: await store.countOutbox(),
    tokens: await store.listTokens(),
  };
}

function abuses(limit: number): Abuse[] {
  const enc = encodeURIComponent;
  const mark = { tags: ['a'], at: T0, label: 'x', direction: 'rise' };
  const routes: { method: Abuse['method']; url: string; good: unknown; scope: Scope }[] = [
    {
      method: 'POST',
      url: '/api/v1/samples',
      good: [{ tag: 'a', t: T0, value: 1 }],
      scope: 'write',
    },
    { method: 'POST', url: '/api/v1/marks', good: mark, scope: 'write' },
    {
      method: 'PATCH',
      url: `/api/v1/marks/${markId}`,
      good: { label: 'y', reason: 'r' },
      scope: 'write',
    },
    {
      method: 'POST',
      url: `/api/v1/marks/${markId}/withdraw`,
      good: { reason: 'r' },
      scope: 'write',
    },
    {
      method: 'PATCH',
      url: '/api/v1/tags/a',
      good: { settings: { inControlArl: 1000 } },
      scope: 'write',
    },
    {
      method: 'POST',
      url: `/api/v1/alerts/${String(alertId)}/acknowledge`,
      good: { note: 'n' },
      scope: 'write',
    },
    {
      method: 'POST',
      url: `/api/v1/alerts/${String(alertId)}/clear`,
      // The body is optional (a note at most), so the bare POST is the good request here.
      good: undefined,
      scope: 'write',
    },
    {
      method: 'POST',
      url: '/api/v1/tokens',
      good: { name: 'n', scopes: ['read'] },
      scope: 'admin',
    },
    { method: 'DELETE', url: `/api/v1/tokens/${tokenId}`, good: undefined, scope: 'admin' },
  ];
  const list: Abuse[] = [];
  for (const route of routes) {
    const good = route.good === undefined ? undefined : JSON.stringify(route.good);
    const base = {
      method: route.method,
      url: route.url,
      ...(good === undefined ? {} : { payload: good }),
    };
    const name = `${route.method} ${route.url}`;
    list.push(
      { ...base, what: `${name} without a token`, auth: null, status: 401 },
      {
        ...base,
        what: `${name} with a made-up token`,
        auth: { header: 'Bearer ts_not-a-token' },
        status: 401,
      },
      {
        ...base,
        what: `${name} with a Basic header`,
        auth: { header: 'Basic YWRtaW46YWRtaW4=' },
        status: 401,
      },
      {
        ...base,
        what: `${name} with the token in the wrong place`,
        auth: { header: 'ts_x' },
        status: 401,
      },
      {
        ...base,
        what: `${name} with a read token`,
        auth: 'read',
        status: 403,
      },
    );
    if (good === undefined) continue;
    list.push(
      {
        method: route.method,
        url: route.url,
        what: `${name} malformed JSON`,
        payload: good.slice(0, -2),
        auth: route.scope,
        status: 400,
      },
      {
        method: route.method,
        url: route.url,
        what: `${name} oversized`,
        payload: `${good.slice(0, -1)}${' '.repeat(limit)}${good.slice(-1)}`,
        auth: route.scope,
        status: 413,
      },
      {
        method: route.method,
        url: route.url,
        what: `${name} a bare string`,
        payload: '"DROP TABLE samples"',
        auth: route.scope,
        status: 400,
      },
      {
        method: route.method,
        url: route.url,
        what: `${name} null`,
        payload: 'null',
        auth: route.scope,
        status: 400,
      },
    );
  }
  const writes = (
    what: string,
    method: Abuse['method'],
    url: string,
    payload: unknown,
    status: number,
    scope: Scope = 'write',
  ): Abuse => ({
    what,
    method,
    url,
    ...(payload === undefined ? {} : { payload: JSON.stringify(payload) }),
    auth: scope,
    status,
  });
  list.push(
    // Wrong types and unknown fields, route by route.
    writes('samples as an object', 'POST', '/api/v1/samples', { tag: 'a', t: T0, value: 1 }, 400),
    writes('a mark with a string time', 'POST', '/api/v1/marks', { ...mark, at: 'yesterday' }, 400),
    writes('a mark with an unknown field', 'POST', '/api/v1/marks', { ...mark, admin: true }, 400),
    writes(
      'a mark on a traversal tag',
      'POST',
      '/api/v1/marks',
      { ...mark, tags: [TRAVERSAL] },
      404,
    ),
    writes('a mark on an SQL tag', 'POST', '/api/v1/marks', { ...mark, tags: [SQL] }, 404),
    writes(
      'a mark with a bad direction',
      'POST',
      '/api/v1/marks',
      { ...mark, direction: `up'--` },
      400,
    ),
    writes(
      'a correction with a number label',
      'PATCH',
      `/api/v1/marks/${markId}`,
      { label: 1, reason: 'r' },
      400,
    ),
    writes(
      'a correction with an unknown field',
      'PATCH',
      `/api/v1/marks/${markId}`,
      { id: 'x', reason: 'r' },
      400,
    ),
    writes('a withdrawal without a reason', 'POST', `/api/v1/marks/${markId}/withdraw`, {}, 400),
    writes(
      'tag settings of the wrong type',
      'PATCH',
      '/api/v1/tags/a',
      { settings: { inControlArl: '1e9' } },
      400,
    ),
    writes(
      'tag settings with an unknown field',
      'PATCH',
      '/api/v1/tags/a',
      { settings: { sql: SQL } },
      400,
    ),
    writes(
      'an acknowledgement with a number note',
      'POST',
      `/api/v1/alerts/${String(alertId)}/acknowledge`,
      { note: 5 },
      400,
    ),
    writes(
      'a clearing with an SQL field beside its note',
      'POST',
      `/api/v1/alerts/${String(alertId)}/clear`,
      { note: 'n', state: `open'; --` },
      400,
    ),
    writes(
      'a token with an unknown scope',
      'POST',
      '/api/v1/tokens',
      { name: 'n', scopes: ['root'] },
      400,
      'admin',
    ),
    writes(
      'a token with a number name',
      'POST',
      '/api/v1/tokens',
      { name: 7, scopes: ['read'] },
      400,
      'admin',
    ),
    writes(
      'a token asking for its own secret',
      'POST',
      '/api/v1/tokens',
      { name: 'n', scopes: ['read'], secret: 's' },
      400,
      'admin',
    ),
    // Names and ids from the URL: data to look up, never paths or SQL.
    writes(
      'a traversal mark id',
      'PATCH',
      `/api/v1/marks/${enc(TRAVERSAL)}`,
      { label: 'y', reason: 'r' },
      404,
    ),
    writes(
      'an SQL mark id',
      'PATCH',
      `/api/v1/marks/${enc(`x' OR '1'='1`)}`,
      { label: 'y', reason: 'r' },
      404,
    ),
    writes(
      'a traversal mark withdrawn',
      'POST',
      `/api/v1/marks/${enc(TRAVERSAL)}/withdraw`,
      { reason: 'r' },
      404,
    ),
    writes(
      'a traversal tag',
      'PATCH',
      `/api/v1/tags/${enc(TRAVERSAL)}`,
      { settings: { inControlArl: 1000 } },
      404,
    ),
    writes(
      'an SQL tag',
      'PATCH',
      `/api/v1/tags/${enc(SQL)}`,
      { settings: { inControlArl: 1000 } },
      404,
    ),
    writes(
      'a raw traversal in the path',
      'PATCH',
      `/api/v1/tags/${TRAVERSAL}`,
      { settings: { inControlArl: 1000 } },
      404,
    ),
    writes(
      'an SQL alert id',
      'POST',
      `/api/v1/alerts/${enc(`1 OR 1=1`)}/acknowledge`,
      { note: 'n' },
      400,
    ),
    writes(
      'a traversal alert id',
      'POST',
      `/api/v1/alerts/${enc('../1')}/clear`,
      { note: 'n' },
      400,
    ),
    writes(
      'an alert that does not exist',
      'POST',
      '/api/v1/alerts/999999/clear',
      { note: 'n' },
      404,
    ),
    writes(
      'a traversal token id',
      'DELETE',
      `/api/v1/tokens/${enc(TRAVERSAL)}`,
      undefined,
      404,
      'admin',
    ),
    writes(
      'an SQL token id',
      'DELETE',
      `/api/v1/tokens/${enc(`x' OR '1'='1`)}`,
      undefined,
      404,
      'admin',
    ),
  );
  return list;
}

describe('hostile requests on the write routes', () => {
  it('answers each with its 4xx from the catalogue and writes nothing but the quarantine', async () => {
    if (api === undefined) throw new Error('no api');
    const test = api;
    const catalogued = new Set(Object.keys(errorCatalogue));
    const before = await snapshot(test);
    const outcomes: string[] = [];
    const cases = abuses(test.config.http.bodyLimitBytes);
    for (const abuse of cases) {
      const headers: Record<string, string> = { 'content-type': 'application/json' };
      if (abuse.auth !== null) {
        headers.authorization =
          typeof abuse.auth === 'string' ? test.as(abuse.auth).authorization : abuse.auth.header;
      }
      if (abuse.payload === undefined) delete headers['content-type'];
      const response = await test.app.inject({
        method: abuse.method,
        url: abuse.url,
        headers,
        ...(abuse.payload === undefined ? {} : { payload: abuse.payload }),
      });
      const code = response.json<{ code?: unknown }>().code;
      outcomes.push(
        `${abuse.what}: ${String(response.statusCode)}${catalogued.has(String(code)) ? '' : ' (no catalogue code)'}`,
      );
    }
    expect(outcomes).toEqual(cases.map((abuse) => `${abuse.what}: ${String(abuse.status)}`));
    // A sample batch refused as a whole from a writer is kept in the quarantine with its reason, as
    // every refused input is (nothing is dropped silently): the bare string, the null and the object.
    // Nothing refused at the door (no token, wrong token, too small a scope) leaves a trace.
    expect(await snapshot(test)).toEqual({ ...before, quarantine: Number(before.quarantine) + 3 });
  }, 60_000);

  it('keeps traversal and SQL in sample tag names as plain names, beside the samples', async () => {
    if (api === undefined) throw new Error('no api');
    const test = api;
    const before = await test.store.countSamples();
    const response = await test.app.inject({
      method: 'POST',
      url: '/api/v1/samples',
      headers: test.as('write'),
      payload: [
        { tag: TRAVERSAL, t: T0 - MINUTE, value: 1 },
        { tag: SQL, t: T0 - MINUTE, value: 2 },
      ],
    });
    expect(response.json()).toMatchObject({ stored: 2, quarantined: 0 });
    expect(await test.store.countSamples()).toBe(before + 2);
    expect(await test.store.countSamples('a')).toBe(40);
    for (const name of [TRAVERSAL, SQL]) {
      const tag = await test.app.inject({
        method: 'GET',
        url: `/api/v1/tags/${encodeURIComponent(name)}`,
        headers: test.as('read'),
      });
      expect(tag.json()).toMatchObject({ name });
    }
  }, 30_000);
});
