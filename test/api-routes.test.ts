/**
 * The API through Fastify's inject: every route's answer and its refusals, against a real SQLite
 * file. The same app over a real socket is covered in api-http.test.ts.
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { errorCatalogue } from '@trueshift/errors';
import { CAUTION } from '@trueshift/config';
import { computeEvidence, seededRandom, windowDifferences } from '@trueshift/stats';
import type { SampleInput } from '@trueshift/store';
import type { LightMyRequestResponse } from 'fastify';
import { startTestApi, T0 } from './helpers/api.js';
import type { TestApi } from './helpers/api.js';

const MINUTE = 60_000;

function body(response: LightMyRequestResponse): Record<string, unknown> {
  return response.json<Record<string, unknown>>();
}

function expectError(response: LightMyRequestResponse, code: keyof typeof errorCatalogue): void {
  expect({ status: response.statusCode, code: body(response).code }).toEqual({
    status: errorCatalogue[code].status,
    code,
  });
  expect(body(response).message).toBe(errorCatalogue[code].message);
}

function samples(
  tag: string,
  values: readonly number[],
  start = T0 - 1000 * MINUTE,
): SampleInput[] {
  return values.map((value, i) => ({
    tag,
    t: start + i * MINUTE,
    value,
    quality: 192,
    source: 'test',
    receivedAt: T0,
  }));
}

/** "METHOD /path" for every route in Fastify's printRoutes tree. */
function servedRoutes(tree: string): string[] {
  const stack: string[] = [];
  const routes: string[] = [];
  for (const line of tree.split('\n')) {
    const match = /^([│ ]*)[├└]── (\S+)(?: \(([^)]+)\))?$/u.exec(line);
    if (match === null) continue;
    const depth = (match[1] ?? '').length / 4;
    stack.length = depth;
    const path = (stack[depth - 1] ?? '') + (match[2] ?? '');
    stack.push(path);
    for (const method of (match[3] ?? '').split(', ')) {
      if (method !== '' && method !== 'HEAD') routes.push(`${method} ${path}`);
    }
  }
  return routes;
}

describe('API routes through inject', () => {
  let api: TestApi;

  beforeEach(async () => {
    api = await startTestApi();
  });

  afterEach(async () => {
    await api.close();
  });

  const get = (url: string, scope: 'read' | 'write' | 'admin' | null = 'read') =>
    api.app.inject({ method: 'GET', url, headers: scope === null ? {} : api.as(scope) });
  const send = (
    method: 'POST' | 'PATCH' | 'DELETE',
    url: string,
    payload: unknown,
    scope: 'read' | 'write' | 'admin' | null = 'write',
  ) =>
    api.app.inject({
      method,
      url,
      headers: scope === null ? {} : api.as(scope),
      ...(payload === undefined ? {} : { payload: payload as Record<string, unknown> }),
    });

  describe('access', () => {
    it('refuses reading without a token, with a bad one and with a revoked one (401)', async () => {
      expectError(await get('/api/v1/tags', null), 'UNAUTHORIZED');
      // The HEAD twin of a GET route is guarded alike.
      expect((await api.app.inject({ method: 'HEAD', url: '/api/v1/tags' })).statusCode).toBe(401);
      const bad = await api.app.inject({
        method: 'GET',
        url: '/api/v1/tags',
        headers: { authorization: `Bearer ts_${'x'.repeat(43)}` },
      });
      expectError(bad, 'UNAUTHORIZED');
      const notBearer = await api.app.inject({
        method: 'GET',
        url: '/api/v1/tags',
        headers: { authorization: `Basic ${api.tokens.read}` },
      });
      expectError(notBearer, 'UNAUTHORIZED');

      const created = body(
        await send('POST', '/api/v1/tokens', { name: 'short-lived', scopes: ['read'] }, 'admin'),
      );
      const secret = created.secret as string;
      const id = (created.token as { id: string }).id;
      const withIt = { authorization: `Bearer ${secret}` };
      expect(
        (await api.app.inject({ method: 'GET', url: '/api/v1/tags', headers: withIt })).statusCode,
      ).toBe(200);
      expect((await send('DELETE', `/api/v1/tokens/${id}`, undefined, 'admin')).statusCode).toBe(
        200,
      );
      const revoked = await api.app.inject({ method: 'GET', url: '/api/v1/tags', headers: withIt });
      expectError(revoked, 'UNAUTHORIZED');
      expect(body(revoked).detail).toContain('revoked');
    });

    it('refuses a route outside the token scopes (403), and admin covers all', async () => {
      const mark = { tags: ['x'], at: T0, label: 'l', direction: 'rise' };
      expectError(await send('POST', '/api/v1/marks', mark, 'read'), 'FORBIDDEN');
      expectError(await get('/api/v1/tokens', 'read'), 'FORBIDDEN');
      expectError(await get('/api/v1/tokens', 'write'), 'FORBIDDEN');
      expectError(await get('/api/v1/outbox', 'write'), 'FORBIDDEN');
      expectError(await get('/api/v1/config', 'read'), 'FORBIDDEN');
      expectError(
        await api.app.inject({
          method: 'POST',
          url: '/api/v1/samples',
          headers: api.as('read'),
          payload: [],
        }),
        'FORBIDDEN',
      );
      // write covers reading; admin covers everything.
      expect((await get('/api/v1/tags', 'write')).statusCode).toBe(200);
      expect((await get('/api/v1/tags', 'admin')).statusCode).toBe(200);
      expect((await get('/api/v1/tokens', 'admin')).statusCode).toBe(200);
      // Refused before the body is read: a malformed body still gets 401.
      const early = await api.app.inject({
        method: 'POST',
        url: '/api/v1/marks',
        headers: { 'content-type': 'application/json' },
        payload: '{not json',
      });
      expectError(early, 'UNAUTHORIZED');
    });

    it('answers health, readiness and the OpenAPI document without a token', async () => {
      expect(body(await get('/health', null))).toEqual({ status: 'ok' });
      expect(body(await get('/ready', null))).toMatchObject({ ready: true, reasons: [] });
      expect((await get('/api/v1/openapi.json', null)).statusCode).toBe(200);
      expectError(await get('/metrics', null), 'UNAUTHORIZED');
    });
  });

  describe('tags and samples', () => {
    it('lists tags, reads one, changes its settings and refuses bad settings', async () => {
      await api.store.writeSamples(samples('evap1/steam', [1, 2, 3]));
      expect(
        (body(await get('/api/v1/tags')).tags as { name: string }[]).map((t) => t.name),
      ).toEqual(['evap1/steam']);
      // A "/" in a tag name travels percent-encoded.
      expect(body(await get('/api/v1/tags/evap1%2Fsteam')).name).toBe('evap1/steam');
      expectError(await get('/api/v1/tags/nothing'), 'TAG_NOT_FOUND');

      api.now.t = T0 + 5;
      const patched = await send('PATCH', '/api/v1/tags/evap1%2Fsteam', {
        unit: 't/h',
        better: 'lower',
        validMin: 0,
        settings: { nBefore: 40, riskLevel: 0.01 },
      });
      expect(patched.statusCode).toBe(200);
      expect(body(patched)).toMatchObject({
        unit: 't/h',
        better: 'lower',
        validMin: 0,
        validMax: null,
        settings: { nBefore: 40, riskLevel: 0.01 },
        updatedAt: T0 + 5,
      });
      // null takes a setting back to the default; other settings stay.
      const reset = await send('PATCH', '/api/v1/tags/evap1%2Fsteam', {
        settings: { nBefore: null },
      });
      expect(body(reset).settings).toEqual({ riskLevel: 0.01 });

      expectError(
        await send('PATCH', '/api/v1/tags/evap1%2Fsteam', { settings: { riskLevel: 2 } }),
        'REQUEST_INVALID',
      );
      expectError(
        await send('PATCH', '/api/v1/tags/evap1%2Fsteam', { settings: { color: 'red' } }),
        'REQUEST_INVALID',
      );
      expectError(
        await send('PATCH', '/api/v1/tags/evap1%2Fsteam', { validMin: 5, validMax: 1 }),
        'REQUEST_INVALID',
      );
      expectError(await send('PATCH', '/api/v1/tags/evap1%2Fsteam', {}), 'REQUEST_INVALID');
      expectError(await send('PATCH', '/api/v1/tags/nothing', { unit: 'x' }), 'TAG_NOT_FOUND');
    });

    it('pages samples from the newest back with a cursor, and thins them keeping extremes', async () => {
      const values = Array.from({ length: 25 }, (_, i) => i);
      values[7] = 1000; // a spike that thinning must keep
      await api.store.writeSamples(samples('p', values));
      const start = T0 - 1000 * MINUTE;

      const first = body(await get('/api/v1/tags/p/samples?limit=10'));
      const firstT = (first.samples as { t: number[] }).t;
      expect(firstT).toEqual(Array.from({ length: 10 }, (_, i) => start + (15 + i) * MINUTE));
      const second = body(
        await get(`/api/v1/tags/p/samples?limit=10&cursor=${first.next as string}`),
      );
      expect((second.samples as { t: number[] }).t[0]).toBe(start + 5 * MINUTE);
      const third = body(
        await get(`/api/v1/tags/p/samples?limit=10&cursor=${second.next as string}`),
      );
      expect((third.samples as { value: number[] }).value).toEqual([0, 1, 2, 3, 4]);
      expect(third.next).toBeNull();

      const ranged = body(
        await get(`/api/v1/tags/p/samples?from=${start + 3 * MINUTE}&to=${start + 6 * MINUTE}`),
      );
      expect((ranged.samples as { value: number[] }).value).toEqual([3, 4, 5]);

      const thinned = body(await get('/api/v1/tags/p/samples?thin=6'));
      const kept = thinned.samples as { t: number[]; value: number[] };
      expect(thinned).toMatchObject({ thinned: true, total: 25, next: null });
      expect(kept.t.length).toBeLessThanOrEqual(6);
      expect(kept.value).toContain(1000);
      expect(kept.value).toContain(0);
      expect(kept.value).toContain(24);
      expect([...kept.t].sort((a, b) => a - b)).toEqual(kept.t);

      expectError(await get('/api/v1/tags/p/samples?cursor=bm9wZQ'), 'REQUEST_INVALID');
      expectError(await get('/api/v1/tags/p/samples?thin=1'), 'REQUEST_INVALID');
      expectError(await get('/api/v1/tags/p/samples?limit=ten'), 'REQUEST_INVALID');
      expectError(await get('/api/v1/tags/p/samples?colour=blue'), 'REQUEST_INVALID');
      expectError(
        await get(`/api/v1/tags/p/samples?thin=4&cursor=${first.next as string}`),
        'REQUEST_INVALID',
      );
      expectError(await get('/api/v1/tags/q/samples'), 'TAG_NOT_FOUND');
    });

    it('takes samples on POST /api/v1/samples with the write scope', async () => {
      const response = await api.app.inject({
        method: 'POST',
        url: '/api/v1/samples',
        headers: api.as('write'),
        payload: [
          { tag: 'evap1.brix', t: T0 - MINUTE, value: 42.5 },
          { tag: 'evap1.brix', t: T0 - MINUTE, value: 'high' },
        ],
      });
      expect(response.statusCode).toBe(200);
      expect(body(response)).toMatchObject({ stored: 1, quarantined: 1 });
      const quarantine = body(await get('/api/v1/quarantine'));
      expect((quarantine.entries as { reason: string }[])[0]?.reason).toContain('index 1');
    });
  });

  describe('marks', () => {
    it('creates, corrects with a reason, withdraws, and keeps every revision', async () => {
      await api.store.writeSamples(samples('a', [1]));
      await api.store.writeSamples(samples('b', [1]));
      const created = await send('POST', '/api/v1/marks', {
        tags: ['a'],
        at: T0 - 10 * MINUTE,
        label: 'New trap',
        direction: 'fall',
        smallestShift: 0.5,
      });
      expect(created.statusCode).toBe(201);
      const id = body(created).id as string;
      expect(body(created)).toMatchObject({
        tags: ['a'],
        revision: 1,
        note: '',
        withdrawnAt: null,
      });

      api.now.t = T0 + 1;
      const corrected = await send('PATCH', `/api/v1/marks/${id}`, {
        reason: 'It also touched b',
        tags: ['a', 'b'],
      });
      expect(body(corrected)).toMatchObject({ tags: ['a', 'b'], revision: 2, updatedAt: T0 + 1 });

      expect((body(await get('/api/v1/marks?tag=b')).marks as unknown[]).length).toBe(1);

      api.now.t = T0 + 2;
      const withdrawn = await send('POST', `/api/v1/marks/${id}/withdraw`, {
        reason: 'Never installed',
      });
      expect(body(withdrawn)).toMatchObject({ withdrawnAt: T0 + 2, revision: 3 });
      expect(body(await get('/api/v1/marks')).marks).toEqual([]);
      expect(
        (body(await get('/api/v1/marks?includeWithdrawn=true')).marks as unknown[]).length,
      ).toBe(1);

      const one = body(await get(`/api/v1/marks/${id}`));
      const revisions = one.revisions as { action: string; reason: string; changedBy: string }[];
      expect(revisions.map((r) => [r.action, r.reason])).toEqual([
        ['created', ''],
        ['corrected', 'It also touched b'],
        ['withdrawn', 'Never installed'],
      ]);
      expect(revisions[1]?.changedBy).toBe('token:writer');

      expectError(
        await send('PATCH', `/api/v1/marks/${id}`, { reason: 'again', label: 'x' }),
        'MARK_WITHDRAWN',
      );
      expectError(
        await send('POST', `/api/v1/marks/${id}/withdraw`, { reason: 'again' }),
        'MARK_WITHDRAWN',
      );
      expectError(await get('/api/v1/marks/nope'), 'MARK_NOT_FOUND');
      expectError(
        await send('POST', '/api/v1/marks/nope/withdraw', { reason: 'x' }),
        'MARK_NOT_FOUND',
      );
    });

    it('refuses marks on unknown tags, bad names, and correction without a reason or change', async () => {
      await api.store.writeSamples(samples('a', [1]));
      const base = { tags: ['a'], at: T0, label: 'x', direction: 'rise' };
      expectError(
        await send('POST', '/api/v1/marks', { ...base, tags: ['ghost'] }),
        'TAG_NOT_FOUND',
      );
      expectError(
        await send('POST', '/api/v1/marks', { ...base, tags: ['a+#'] }),
        'TAG_NAME_INVALID',
      );
      expectError(await send('POST', '/api/v1/marks', { ...base, tags: [] }), 'REQUEST_INVALID');
      expectError(
        await send('POST', '/api/v1/marks', { ...base, direction: 'up' }),
        'REQUEST_INVALID',
      );
      const id = body(await send('POST', '/api/v1/marks', base)).id as string;
      expectError(await send('PATCH', `/api/v1/marks/${id}`, { label: 'y' }), 'REQUEST_INVALID');
      expectError(
        await send('PATCH', `/api/v1/marks/${id}`, { reason: 'nothing to change' }),
        'REQUEST_INVALID',
      );
      expectError(await send('POST', `/api/v1/marks/${id}/withdraw`, {}), 'REQUEST_INVALID');
    });
  });

  describe('request bodies', () => {
    const mark = { tags: ['a'], at: T0, label: 'x', direction: 'rise' };
    const raw = (payload: string, contentType = 'application/json') =>
      api.app.inject({
        method: 'POST',
        url: '/api/v1/marks',
        headers: { ...api.as('write'), 'content-type': contentType },
        payload,
      });

    beforeEach(async () => {
      await api.store.writeSamples(samples('a', [1]));
    });

    it('refuses malformed JSON, wrong types, unknown fields and other media types', async () => {
      expectError(await raw('{"tags": ["a"], "at": '), 'PAYLOAD_NOT_JSON');
      expectError(await raw(''), 'PAYLOAD_NOT_JSON');
      expectError(await raw(JSON.stringify({ ...mark, at: String(T0) })), 'REQUEST_INVALID');
      expectError(await raw(JSON.stringify({ ...mark, at: 1.5 })), 'REQUEST_INVALID');
      expectError(await raw(JSON.stringify({ ...mark, tags: 'a' })), 'REQUEST_INVALID');
      const unknown = await raw(JSON.stringify({ ...mark, colour: 'red' }));
      expectError(unknown, 'REQUEST_INVALID');
      expect(body(unknown).detail).toContain('additional properties');
      expectError(await raw(JSON.stringify([mark])), 'REQUEST_INVALID');
      expectError(
        await raw('tags=a', 'application/x-www-form-urlencoded'),
        'CONTENT_TYPE_UNSUPPORTED',
      );
      expect((await raw(JSON.stringify(mark))).statusCode).toBe(201);
    });

    it('refuses a body over the configured limit with 413 and the catalogue body', async () => {
      const big = JSON.stringify({ ...mark, note: 'x'.repeat(api.config.http.bodyLimitBytes) });
      expectError(await raw(big), 'PAYLOAD_TOO_LARGE');
      const bigSamples = await api.app.inject({
        method: 'POST',
        url: '/api/v1/samples',
        headers: { ...api.as('write'), 'content-type': 'application/json' },
        payload: `[${' '.repeat(api.config.http.bodyLimitBytes)}]`,
      });
      expectError(bigSamples, 'PAYLOAD_TOO_LARGE');
    });
  });

  describe('SQL metacharacters', () => {
    it('stores and returns names, labels and notes verbatim', async () => {
      const nasty = `evap'1"; DROP TABLE samples; -- %_\\`;
      const response = await api.app.inject({
        method: 'POST',
        url: '/api/v1/samples',
        headers: api.as('write'),
        payload: [{ tag: nasty, t: T0 - MINUTE, value: 1 }],
      });
      expect(body(response)).toMatchObject({ stored: 1 });
      const tag = body(await get(`/api/v1/tags/${encodeURIComponent(nasty)}`));
      expect(tag.name).toBe(nasty);
      // LIKE wildcards in a name match nothing but themselves.
      expectError(
        await get(`/api/v1/tags/${encodeURIComponent('evap\'1"; DROP TABLE samples; -- %%\\')}`),
        'TAG_NOT_FOUND',
      );

      const label = `Robert'); DROP TABLE marks;--`;
      const created = body(
        await send('POST', '/api/v1/marks', {
          tags: [nasty],
          at: T0,
          label,
          note: `' OR '1'='1`,
          direction: 'either',
        }),
      );
      expect(created).toMatchObject({ tags: [nasty], label, note: `' OR '1'='1` });
      const listed = body(await get(`/api/v1/marks?tag=${encodeURIComponent(nasty)}`)).marks as {
        label: string;
      }[];
      expect(listed.map((m) => m.label)).toEqual([label]);

      const token = body(
        await send('POST', '/api/v1/tokens', { name: label, scopes: ['read'] }, 'admin'),
      );
      expect((token.token as { name: string }).name).toBe(label);
      const names = (body(await get('/api/v1/tokens', 'admin')).tokens as { name: string }[]).map(
        (t) => t.name,
      );
      expect(names).toContain(label);
      expect(await api.store.countSamples()).toBe(1);
    });
  });

  describe('evidence', () => {
    const rng = seededRandom(7);
    const history = Array.from({ length: 120 }, () => 10 + rng.normal());
    const after = Array.from({ length: 12 }, () => 9 + rng.normal());

    async function markWithEvidence(): Promise<{
      id: string;
      evidence: ReturnType<typeof computeEvidence>;
    }> {
      const start = T0 - 200 * MINUTE;
      await api.store.writeSamples(samples('steam', [...history, ...after], start));
      const at = start + history.length * MINUTE;
      const id = body(
        await send('POST', '/api/v1/marks', {
          tags: ['steam'],
          at,
          label: 'trap',
          direction: 'fall',
        }),
      ).id as string;
      const evidence = computeEvidence({
        history,
        after,
        direction: 'fall',
        riskLevel: 0.05,
        nBefore: 30,
      });
      for (let n = 10; n <= 12; n++) {
        await api.store.addEvidenceSnapshot({
          markId: id,
          tag: 'steam',
          sampleTime: at + (n - 1) * MINUTE,
          evaluatedAt: T0 + n,
          nAfter: n,
          risk: n === 12 && evidence.reference.status === 'ok' ? evidence.reference.risk : 0.5,
          verdict: n === 12 ? evidence.verdict : 'still-gathering',
          body: n === 12 ? evidence : { nAfter: n },
        });
      }
      return { id, evidence };
    }

    it('gives the latest evidence per tag and per mark, with the caution', async () => {
      const { id, evidence } = await markWithEvidence();
      const perTag = body(await get('/api/v1/tags/steam/evidence'));
      expect(perTag.caution).toBe(CAUTION);
      const [first] = perTag.marks as {
        mark: { id: string };
        evidence: { nAfter: number; verdict: string };
      }[];
      expect(first?.mark.id).toBe(id);
      expect(first?.evidence).toMatchObject({ nAfter: 12, verdict: evidence.verdict });

      const perMark = body(await get(`/api/v1/marks/${id}/evidence/steam`));
      expect(perMark.caution).toBe(CAUTION);
      expect((perMark.evidence as { body: { verdict: string } }).body.verdict).toBe(
        evidence.verdict,
      );

      const path = body(await get(`/api/v1/marks/${id}/evidence/steam/path`));
      expect((path.points as { nAfter: number }[]).map((p) => p.nAfter)).toEqual([10, 11, 12]);
      expect(path.caution).toBe(CAUTION);

      expectError(await get(`/api/v1/marks/${id}/evidence/brix`), 'EVIDENCE_NOT_FOUND');
      expectError(await get('/api/v1/marks/nope/evidence/steam'), 'MARK_NOT_FOUND');
      expectError(await get('/api/v1/tags/nope/evidence'), 'TAG_NOT_FOUND');
    });

    it('rebuilds the reference distribution behind the latest evidence from the stored history', async () => {
      const { id, evidence } = await markWithEvidence();
      const reference = body(await get(`/api/v1/marks/${id}/evidence/steam/reference`));
      const expected = Array.from(windowDifferences(history, 30, 12));
      expect(reference).toMatchObject({
        caution: CAUTION,
        nHistory: 120,
        nBefore: 30,
        nAfter: 12,
        differences: evidence.reference.m,
        observedShift: evidence.observedShift,
        direction: 'fall',
        basis: 'batch',
      });
      const dots = reference.dotPlot as { kind: string; values: number[] };
      expect(dots.kind).toBe('points');
      expect(dots.values).toHaveLength(expected.length);
      dots.values.forEach((v, i) => {
        expect(v).toBeCloseTo(expected[i] ?? Number.NaN, 12);
      });
      const binned = body(
        await get(`/api/v1/marks/${id}/evidence/steam/reference?maxPoints=10&bins=7`),
      );
      expect(binned.dotPlot).toMatchObject({ kind: 'bins', total: expected.length });
      expect((binned.dotPlot as { counts: number[] }).counts).toHaveLength(7);

      const empty = body(
        await send('POST', '/api/v1/marks', {
          tags: ['steam'],
          at: T0,
          label: 'later',
          direction: 'rise',
        }),
      );
      expectError(
        await get(`/api/v1/marks/${empty.id as string}/evidence/steam/reference`),
        'EVIDENCE_NOT_FOUND',
      );
    });

    it('answers a repeated reference request from memory until a new snapshot, a correction or another mark', async () => {
      const { id } = await markWithEvidence();
      const url = `/api/v1/marks/${id}/evidence/steam/reference`;
      const first = await get(url);
      expect(first.statusCode).toBe(200);
      expect(body(first).nHistory).toBe(120);

      // A back-filled sample before the mark changes the history, but without a new evaluation
      // the cached answer stands: the same body proves it was not rebuilt from the store.
      const start = T0 - 200 * MINUTE;
      await api.store.writeSamples(samples('steam', [10.5], start - MINUTE));
      const second = await get(url);
      expect(second.statusCode).toBe(200);
      expect(body(second)).toEqual(body(first));
      // Another query is another answer, built from the store as it is now.
      expect(body(await get(`${url}?maxPoints=10`)).nHistory).toBe(121);

      // The analyser judging again (a new snapshot) gives a fresh answer.
      const { mark } = body(await get(`/api/v1/marks/${id}`)) as { mark: { at: number } };
      await api.store.addEvidenceSnapshot({
        markId: id,
        tag: 'steam',
        sampleTime: mark.at + 12 * MINUTE,
        evaluatedAt: T0 + 13,
        nAfter: 13,
        risk: 0.5,
        verdict: 'still-gathering',
        body: { nAfter: 13 },
      });
      const third = body(await get(url));
      expect(third).not.toEqual(body(first));
      expect(third).toMatchObject({ nHistory: 121, nAfter: 13, differences: 121 - 30 - 13 + 1 });
      expect(body(await get(url))).toEqual(third);

      // So does a correction of the mark (a new revision), with no new snapshot.
      await api.store.writeSamples(samples('steam', [9.5], start - 2 * MINUTE));
      expect(body(await get(url)).nHistory).toBe(121);
      const corrected = await send('PATCH', `/api/v1/marks/${id}`, {
        label: 'trap, renamed',
        reason: 'typo',
      });
      expect(corrected.statusCode).toBe(200);
      expect(body(await get(url)).nHistory).toBe(122);

      // And so does an earlier mark whose settling period takes 5 samples out of the history.
      const earlier = await send('POST', '/api/v1/marks', {
        tags: ['steam'],
        at: start + 9.5 * MINUTE,
        label: 'earlier',
        direction: 'rise',
        settlingMs: 5 * MINUTE,
      });
      expect(earlier.statusCode).toBe(201);
      expect(body(await get(url)).nHistory).toBe(117);
    });
  });

  describe('alerts, quarantine, outbox, tokens, config', () => {
    const targets = [{ channel: 'mqtt' as const, target: 'trueshift/alerts', createdAt: T0 }];

    it('lists alerts by state, acknowledges with a note, clears, and queues deliveries', async () => {
      const raised = await api.store.raiseAlert(
        {
          tag: 'steam',
          markId: null,
          kind: 'stale',
          dedupeKey: 'stale:steam',
          title: 'steam: no sample',
          at: T0,
          evidence: { silentForMs: 1 },
        },
        targets,
      );
      const id = raised.alert.id;
      const open = body(await get('/api/v1/alerts?state=open'));
      expect(open.caution).toBe(CAUTION);
      expect((open.alerts as { id: number }[]).map((a) => a.id)).toEqual([id]);
      expect(body(await get('/api/v1/alerts?state=cleared')).alerts).toEqual([]);
      expect(body(await get(`/api/v1/alerts/${id}`)).alert).toMatchObject({ id, state: 'open' });

      api.now.t = T0 + 100;
      const acknowledged = await send('POST', `/api/v1/alerts/${id}/acknowledge`, {
        note: 'Looking at the trap',
      });
      expect(body(acknowledged)).toMatchObject({
        change: 'acknowledged',
        caution: CAUTION,
        alert: {
          state: 'acknowledged',
          acknowledgedBy: 'token:writer',
          note: 'Looking at the trap',
          acknowledgedAt: T0 + 100,
        },
      });
      const cleared = await send('POST', `/api/v1/alerts/${id}/clear`, undefined);
      expect(body(cleared)).toMatchObject({
        change: 'cleared',
        alert: { state: 'cleared', clearedAt: T0 + 100 },
      });
      expectError(
        await send('POST', `/api/v1/alerts/${id}/acknowledge`, { note: 'late' }),
        'ALERT_CLEARED',
      );
      expectError(await send('POST', '/api/v1/alerts/999/clear', undefined), 'ALERT_NOT_FOUND');
      expectError(await get('/api/v1/alerts/999'), 'ALERT_NOT_FOUND');
      expectError(await get('/api/v1/alerts/abc'), 'REQUEST_INVALID');
      expectError(await get('/api/v1/alerts?state=gone'), 'REQUEST_INVALID');
      expectError(
        await send('POST', `/api/v1/alerts/${id}/acknowledge`, { note: '' }),
        'REQUEST_INVALID',
      );

      // The API's own changes go to every configured target: here only the MQTT alert topic.
      const outbox = body(await get('/api/v1/outbox?state=pending', 'admin')).entries as {
        idempotencyKey: string;
        target: string;
      }[];
      expect(outbox.map((e) => e.idempotencyKey).sort()).toEqual(
        [`alert:${id}:acknowledged:0`, `alert:${id}:cleared:0`, `alert:${id}:opened:0`].sort(),
      );
      expect(new Set(outbox.map((e) => e.target))).toEqual(new Set([api.config.mqtt.alertTopic]));
      expectError(await get('/api/v1/outbox?state=lost', 'admin'), 'REQUEST_INVALID');
    });

    it('clears with an optional JSON note, and with no body and no Content-Type at all', async () => {
      const raise = async (tag: string): Promise<number> =>
        (
          await api.store.raiseAlert(
            {
              tag,
              markId: null,
              kind: 'stale',
              dedupeKey: `stale:${tag}`,
              title: `${tag}: no sample`,
              at: T0,
              evidence: { silentForMs: 1 },
            },
            targets,
          )
        ).alert.id;
      const withNote = await raise('steam');
      const bare = await raise('brix');
      const empty = await raise('flow');
      const overSocket = await raise('level');
      const clear = (id: number, init: { payload?: string; headers?: Record<string, string> }) =>
        api.app.inject({
          method: 'POST',
          url: `/api/v1/alerts/${String(id)}/clear`,
          headers: { ...api.as('write'), ...init.headers },
          ...(init.payload === undefined ? {} : { payload: init.payload }),
        });
      const state = async (id: number) =>
        (body(await get(`/api/v1/alerts/${String(id)}`)).alert as { state: string }).state;

      // Refused bodies leave the alert as it was.
      const refusals = [
        JSON.stringify({ note: '' }),
        JSON.stringify({ note: 5 }),
        JSON.stringify({ note: 'x'.repeat(2001) }),
        JSON.stringify({ note: 'ok', reason: 'extra' }),
      ];
      for (const payload of refusals) {
        expectError(
          await clear(withNote, { payload, headers: { 'content-type': 'application/json' } }),
          'REQUEST_INVALID',
        );
      }
      expectError(
        await clear(withNote, {
          payload: '{"note":',
          headers: { 'content-type': 'application/json' },
        }),
        'PAYLOAD_NOT_JSON',
      );
      expect(await state(withNote)).toBe('open');

      api.now.t = T0 + 200;
      const noted = await clear(withNote, {
        payload: JSON.stringify({ note: 'Trap replaced on the night shift' }),
        headers: { 'content-type': 'application/json' },
      });
      expect(noted.statusCode).toBe(200);
      expect(body(noted)).toMatchObject({
        change: 'cleared',
        alert: {
          id: withNote,
          state: 'cleared',
          clearedAt: T0 + 200,
          note: 'Trap replaced on the night shift',
        },
      });

      // No body and no Content-Type, as `curl -X POST` sends it.
      const bodiless = await clear(bare, {});
      expect(bodiless.headers['content-type']).toContain('application/json');
      expect(bodiless.statusCode).toBe(200);
      expect(body(bodiless)).toMatchObject({ change: 'cleared', alert: { id: bare } });
      // An empty JSON object is a body without a note.
      const emptyObject = await clear(empty, {
        payload: '{}',
        headers: { 'content-type': 'application/json' },
      });
      expect(body(emptyObject)).toMatchObject({ change: 'cleared', alert: { id: empty } });

      // The same over a real socket: fetch sends Content-Length: 0 and no Content-Type.
      const base = await api.listen();
      const overHttp = await fetch(`${base}/api/v1/alerts/${String(overSocket)}/clear`, {
        method: 'POST',
        headers: api.as('write'),
      });
      expect(overHttp.status).toBe(200);
      expect(await overHttp.json()).toMatchObject({
        change: 'cleared',
        alert: { id: overSocket, state: 'cleared' },
      });

      const states = await Promise.all([withNote, bare, empty, overSocket].map(state));
      expect(states).toEqual(['cleared', 'cleared', 'cleared', 'cleared']);
      expectError(await clear(bare, {}), 'ALERT_CLEARED');
    });

    it('pages the quarantine newest first with its reasons', async () => {
      await api.store.quarantine(
        Array.from({ length: 5 }, (_, i) => ({
          source: i % 2 === 0 ? 'mqtt:plant/a' : 'http',
          raw: `raw ${i}`,
          reason: `reason ${i}`,
          code: 'VALUE_NOT_NUMBER' as const,
          receivedAt: T0 + i,
        })),
      );
      const first = body(await get('/api/v1/quarantine?limit=2'));
      expect((first.entries as { reason: string }[]).map((e) => e.reason)).toEqual([
        'reason 4',
        'reason 3',
      ]);
      const second = body(await get(`/api/v1/quarantine?limit=2&cursor=${first.next as string}`));
      expect((second.entries as { reason: string }[]).map((e) => e.reason)).toEqual([
        'reason 2',
        'reason 1',
      ]);
      const third = body(await get(`/api/v1/quarantine?limit=2&cursor=${second.next as string}`));
      expect((third.entries as { raw: string }[]).map((e) => e.raw)).toEqual(['raw 0']);
      expect(third.next).toBeNull();
      const bySource = body(await get('/api/v1/quarantine?source=http'));
      expect((bySource.entries as unknown[]).length).toBe(2);
      expectError(await get('/api/v1/quarantine?cursor=%%%'), 'REQUEST_INVALID');
    });

    it('creates tokens shown once, lists them without secrets, revokes them', async () => {
      const created = await send(
        'POST',
        '/api/v1/tokens',
        { name: 'historian', scopes: ['write'] },
        'admin',
      );
      expect(created.statusCode).toBe(201);
      expect(created.headers['cache-control']).toBe('no-store');
      const { secret, token } = body(created) as { secret: string; token: { id: string } };
      expect(secret).toMatch(/^ts_[A-Za-z0-9_-]{43}$/);
      const listed = await get('/api/v1/tokens', 'admin');
      expect(listed.body).not.toContain(secret);
      expect(listed.body).not.toContain('hash');
      expect((body(listed).tokens as { name: string }[]).map((t) => t.name).sort()).toEqual([
        'admin',
        'historian',
        'reader',
        'writer',
      ]);
      const revoked = body(await send('DELETE', `/api/v1/tokens/${token.id}`, undefined, 'admin'));
      expect(revoked.token).toMatchObject({ id: token.id, revokedAt: T0 });
      expectError(
        await send('DELETE', '/api/v1/tokens/nope', undefined, 'admin'),
        'TOKEN_NOT_FOUND',
      );
      expectError(
        await send('POST', '/api/v1/tokens', { name: 'x', scopes: ['root'] }, 'admin'),
        'REQUEST_INVALID',
      );
      expectError(
        await send('POST', '/api/v1/tokens', { name: 'x', scopes: [] }, 'admin'),
        'REQUEST_INVALID',
      );
    });

    it('shows the configuration to admins with secrets hidden', async () => {
      const local = await startTestApi({
        config: {
          mqtt: { password: 'hunter2-hunter2' },
          webhooks: [{ url: 'http://127.0.0.1:9/hook', secret: 'a-long-webhook-secret' }],
        },
      });
      try {
        const response = await local.app.inject({
          method: 'GET',
          url: '/api/v1/config',
          headers: local.as('admin'),
        });
        expect(response.statusCode).toBe(200);
        expect(response.body).not.toContain('hunter2');
        expect(response.body).not.toContain('a-long-webhook-secret');
        expect(body(response)).toMatchObject({
          http: { host: '127.0.0.1' },
          webhooks: [{ url: 'http://127.0.0.1:9/hook' }],
        });
      } finally {
        await local.close();
      }
    });
  });

  describe('operations', () => {
    it('counts samples, quarantine, alerts and the outbox in the Prometheus format', async () => {
      await api.store.writeSamples(samples('m', [1, 2, 3]));
      await api.store.quarantine([
        { source: 'http', raw: 'x', reason: 'r', code: 'VALUE_NOT_NUMBER', receivedAt: T0 },
      ]);
      await api.store.raiseAlert(
        {
          tag: 'm',
          markId: null,
          kind: 'stuck',
          dedupeKey: 'stuck:m',
          title: 't',
          at: T0,
          evidence: null,
        },
        [{ channel: 'mqtt', target: 'trueshift/alerts', createdAt: T0 }],
      );
      const response = await get('/metrics');
      expect(response.headers['content-type']).toBe('text/plain; version=0.0.4; charset=utf-8');
      const lines = response.body.split('\n');
      expect(lines).toContain('trueshift_samples_ingested_total 3');
      expect(lines).toContain('trueshift_quarantined_total 1');
      expect(lines).toContain('trueshift_alerts{state="open"} 1');
      expect(lines).toContain('trueshift_outbox_entries{state="pending"} 1');
      expect(lines).toContain('trueshift_outbox_entries{state="dead"} 0');
      expect(lines).toContain('# TYPE trueshift_alerts gauge');
      // Every sample line belongs to a declared metric.
      const declared = new Set(
        lines.filter((l) => l.startsWith('# TYPE ')).map((l) => l.split(' ')[2]),
      );
      for (const line of lines.filter((l) => l !== '' && !l.startsWith('#'))) {
        expect(declared.has(line.split(/[{ ]/)[0])).toBe(true);
      }
    });

    it('is not ready when ingest is down or the analyser lags, and says why', async () => {
      const health = { ingest: { connected: true }, analyser: { lag: 5 } };
      const local = await startTestApi({
        deps: { health: () => health },
        api: { maxAnalyserLag: 100 },
      });
      try {
        const ready = await local.app.inject({ method: 'GET', url: '/ready' });
        expect(ready.statusCode).toBe(200);
        health.ingest = { connected: false };
        health.analyser = { lag: 500 };
        const notReady = await local.app.inject({ method: 'GET', url: '/ready' });
        expect(notReady.statusCode).toBe(503);
        expect(body(notReady).reasons).toEqual([
          'ingest: not connected',
          'analyser: 500 samples behind, more than 100',
        ]);
        const metrics = await local.app.inject({
          method: 'GET',
          url: '/metrics',
          headers: local.as('read'),
        });
        expect(metrics.body).toContain('trueshift_analyser_lag_samples 500');
        expect(metrics.body).toContain('trueshift_ingest_connected 0');
        await local.store.close();
        const storeDown = await local.app.inject({ method: 'GET', url: '/ready' });
        expect(storeDown.statusCode).toBe(503);
        expect((body(storeDown).reasons as string[])[0]).toMatch(/^store: /);
      } finally {
        await local.app.close();
      }
    });

    it('lets anyone read when readWithoutToken is set, but never write', async () => {
      const open = await startTestApi({
        config: { http: { host: '127.0.0.1', port: 0, readWithoutToken: true } },
      });
      try {
        expect((await open.app.inject({ method: 'GET', url: '/api/v1/tags' })).statusCode).toBe(
          200,
        );
        expectError(
          await open.app.inject({
            method: 'POST',
            url: '/api/v1/marks',
            payload: { tags: ['a'], at: 1, label: 'x', direction: 'rise' },
          }),
          'UNAUTHORIZED',
        );
        expectError(
          await open.app.inject({ method: 'GET', url: '/api/v1/tokens' }),
          'UNAUTHORIZED',
        );
        // A wrong token is still refused rather than read as anonymous.
        expectError(
          await open.app.inject({
            method: 'GET',
            url: '/api/v1/tags',
            headers: { authorization: 'Bearer nope' },
          }),
          'UNAUTHORIZED',
        );
      } finally {
        await open.close();
      }
    });

    it('limits write requests per token and answers 429 from the catalogue', async () => {
      const limited = await startTestApi({
        config: { http: { host: '127.0.0.1', port: 0, writeRatePerMinute: 2 } },
      });
      try {
        const post = (scope: 'write' | 'admin') =>
          limited.app.inject({
            method: 'POST',
            url: '/api/v1/tokens',
            headers: limited.as(scope),
            payload: { name: 'n', scopes: ['read'] },
          });
        const patch = () =>
          limited.app.inject({
            method: 'PATCH',
            url: '/api/v1/tags/none',
            headers: limited.as('write'),
            payload: { unit: 'x' },
          });
        expect((await patch()).statusCode).toBe(404);
        expect((await patch()).statusCode).toBe(404);
        const third = await patch();
        expectError(third, 'RATE_LIMITED');
        expect(Number(third.headers['retry-after'])).toBeGreaterThan(0);
        // Another token has its own allowance, and reading is not limited.
        expect((await post('admin')).statusCode).toBe(201);
        expect(
          (
            await limited.app.inject({
              method: 'GET',
              url: '/api/v1/tags',
              headers: limited.as('write'),
            })
          ).statusCode,
        ).toBe(200);
      } finally {
        await limited.close();
      }
    });
  });

  describe('OpenAPI document', () => {
    it('lists every route with its methods', async () => {
      const doc = body(await get('/api/v1/openapi.json', null)) as {
        openapi: string;
        paths: Record<string, Record<string, unknown>>;
      };
      expect(doc.openapi).toMatch(/^3\./);
      const listed = Object.entries(doc.paths).flatMap(([path, methods]) =>
        Object.keys(methods).map((m) => `${m.toUpperCase()} ${path}`),
      );
      expect(listed.sort()).toEqual(
        [
          'GET /api/v1/openapi.json',
          'GET /api/v1/tags',
          'GET /api/v1/tags/{name}',
          'PATCH /api/v1/tags/{name}',
          'GET /api/v1/tags/{name}/samples',
          'GET /api/v1/tags/{name}/evidence',
          'GET /api/v1/marks',
          'POST /api/v1/marks',
          'GET /api/v1/marks/{id}',
          'PATCH /api/v1/marks/{id}',
          'POST /api/v1/marks/{id}/withdraw',
          'GET /api/v1/marks/{id}/evidence/{tag}',
          'GET /api/v1/marks/{id}/evidence/{tag}/path',
          'GET /api/v1/marks/{id}/evidence/{tag}/reference',
          'GET /api/v1/alerts',
          'GET /api/v1/alerts/{id}',
          'POST /api/v1/alerts/{id}/acknowledge',
          'POST /api/v1/alerts/{id}/clear',
          'GET /api/v1/quarantine',
          'GET /api/v1/outbox',
          'POST /api/v1/tokens',
          'GET /api/v1/tokens',
          'DELETE /api/v1/tokens/{id}',
          'GET /api/v1/config',
          'GET /api/v1/events',
          'POST /api/v1/samples',
          'GET /health',
          'GET /ready',
          'GET /metrics',
        ].sort(),
      );
      // And the document lists exactly the routes Fastify serves (HEAD twins of GET aside).
      await api.app.ready();
      const served = servedRoutes(api.app.printRoutes({ commonPrefix: false }));
      expect(served.sort()).toEqual(listed.map((l) => l.replace(/\{(\w+)\}/g, ':$1')).sort());
      const marks = doc.paths['/api/v1/marks']?.post as {
        requestBody: { content: Record<string, { schema: { additionalProperties: boolean } }> };
      };
      expect(marks.requestBody.content['application/json']?.schema.additionalProperties).toBe(
        false,
      );
    });
  });
});
