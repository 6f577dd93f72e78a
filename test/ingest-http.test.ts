/**
 * POST /api/v1/samples on a real Fastify instance and a real SQLite file, through inject and through
 * a listening socket on 127.0.0.1.
 */
import { mkdtemp, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fastify, type FastifyInstance } from 'fastify';
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { errorCatalogue } from '@trueshift/errors';
import { registerHttpIngest, SAMPLES_ROUTE } from '@trueshift/ingest';
import type { Store } from '@trueshift/store';
import { openSqliteStore } from '@trueshift/store-sqlite';
import { failingFirstWrites } from './helpers/store-faults.js';

const T0 = Date.UTC(2026, 0, 1);

let dir: string;
let store: Store;
let app: FastifyInstance;

async function buildApp(
  withStore: Store,
  options = { maxSamples: 1000, maxFutureMs: 60_000 },
): Promise<FastifyInstance> {
  const instance = fastify({ logger: false });
  registerHttpIngest(instance, { store: withStore, clock: () => T0, options });
  await instance.ready();
  return instance;
}

beforeEach(async () => {
  dir = await mkdtemp(join(tmpdir(), 'trueshift-http-'));
  store = openSqliteStore({ path: join(dir, 'store.db') });
  app = await buildApp(store);
});

afterEach(async () => {
  await app.close();
  await store.close();
  await rm(dir, { recursive: true, force: true });
});

function post(body: unknown, contentType = 'application/json') {
  return app.inject({
    method: 'POST',
    url: SAMPLES_ROUTE,
    headers: { 'content-type': contentType },
    payload: typeof body === 'string' ? body : JSON.stringify(body),
  });
}

const goodBatch = [
  { tag: 'reactor.yield', time: '2025-12-31T22:00:00Z', value: 91.2 },
  { tag: 'reactor.yield', t: T0 - 3_600_000, value: 91.6, quality: 192 },
  { tag: 'reactor.purity', time: T0 - 60_000, value: '99.1' },
];

describe('HTTP batch ingest (inject)', () => {
  it('stores a good batch, and a repeat of it as replays', async () => {
    const first = await post(goodBatch);
    expect(first.statusCode).toBe(200);
    expect(first.json()).toEqual({
      stored: 3,
      duplicates: 0,
      conflicts: 0,
      quarantined: 0,
      rejected: [],
    });
    const again = await post(goodBatch);
    expect(again.json()).toMatchObject({ stored: 0, duplicates: 3 });
    expect(Array.from((await store.readSamples('reactor.yield')).value)).toEqual([91.2, 91.6]);
    // Another value for a stored (tag, time) is a conflict: the stored value stays.
    const conflicting = await post([{ tag: 'reactor.purity', time: T0 - 60_000, value: 98 }]);
    expect(conflicting.json()).toMatchObject({ stored: 0, conflicts: 1 });
    expect(Array.from((await store.readSamples('reactor.purity')).value)).toEqual([99.1]);
  });

  it('stores the good samples of a partly bad batch and lists each rejection with its index', async () => {
    const response = await post([
      goodBatch[0],
      { tag: 'reactor.yield', value: 90 },
      { tag: 'reactor.yield', time: T0 - 1000, value: 'n/a' },
      'not a sample',
      { tag: 'reactor.yield', time: T0 + 3_600_000, value: 92 },
    ]);
    expect(response.statusCode).toBe(200);
    const body = response.json<{ stored: number; quarantined: number; rejected: unknown[] }>();
    expect(body).toMatchObject({ stored: 1, quarantined: 4 });
    expect(body.rejected).toEqual([
      { index: 1, code: 'TIME_MISSING', reason: 'At index 1: the time is missing.' },
      {
        index: 2,
        code: 'VALUE_NOT_NUMBER',
        reason: 'At index 2: the value "n/a" is not a number.',
      },
      {
        index: 3,
        code: 'PAYLOAD_SHAPE',
        reason: 'At index 3: the element is a string, not an object with tag, time and value.',
      },
      expect.objectContaining({ index: 4, code: 'TIME_IN_FUTURE' }),
    ]);
    expect(await store.countQuarantine()).toBe(4);
    expect((await store.listQuarantine()).every((entry) => entry.source === 'http')).toBe(true);
  });

  it('answers 400 with the catalogue body when the body is not an array, and when every sample is bad', async () => {
    const notArray = await post({ tag: 'reactor.yield', time: T0, value: 1 });
    expect(notArray.statusCode).toBe(400);
    expect(notArray.json()).toEqual({
      code: 'PAYLOAD_SHAPE',
      message: errorCatalogue.PAYLOAD_SHAPE.message,
      detail:
        'The body is an object; it must be a JSON array of samples, each { "tag", "time", "value", "quality"? }.',
    });
    const allBad = await post([
      { tag: 'a', value: 1 },
      { tag: '', time: T0, value: 1 },
    ]);
    expect(allBad.statusCode).toBe(400);
    expect(allBad.json()).toMatchObject({
      code: 'NO_USABLE_SAMPLES',
      message: errorCatalogue.NO_USABLE_SAMPLES.message,
      rejected: [
        expect.objectContaining({ index: 0, code: 'TIME_MISSING' }),
        expect.objectContaining({ index: 1, code: 'TAG_NAME_INVALID' }),
      ],
    });
    const notJson = await post('[{"tag": "a",');
    expect(notJson.statusCode).toBe(400);
    expect(notJson.json()).toMatchObject({ code: 'PAYLOAD_NOT_JSON' });
    const text = await post('[]', 'text/plain');
    expect(text.statusCode).toBe(415);
    expect(text.json()).toMatchObject({ code: 'CONTENT_TYPE_UNSUPPORTED' });
    expect(await store.countSamples()).toBe(0);
    // Refused bodies are quarantined too; the media type and JSON syntax refusals never reach it.
    expect(await store.countQuarantine()).toBe(3);
  });

  it('refuses a body over the limit with 413, and more samples than allowed', async () => {
    await app.close();
    app = await buildApp(store, { maxSamples: 10, maxFutureMs: 60_000 });
    // 10 samples × 512 bytes is the default limit.
    const big = JSON.stringify([{ tag: 'x', time: T0, value: 1, note: 'n'.repeat(6000) }]);
    const tooLarge = await post(big);
    expect(tooLarge.statusCode).toBe(413);
    expect(tooLarge.json()).toEqual({
      code: 'PAYLOAD_TOO_LARGE',
      message: errorCatalogue.PAYLOAD_TOO_LARGE.message,
      detail: 'The body is larger than 5120 bytes; send the samples in smaller batches.',
    });
    const many = Array.from({ length: 11 }, (_, i) => ({ tag: 'x', time: T0 - i, value: i }));
    const tooMany = await post(many);
    expect(tooMany.statusCode).toBe(413);
    expect(tooMany.json()).toMatchObject({ code: 'PAYLOAD_TOO_LARGE' });
    expect(tooMany.json<{ detail: string }>().detail).toContain('holds 11 samples; at most 10');
    expect(await store.countSamples()).toBe(0);
  });

  it('answers 503 and stores nothing it did not confirm when the store fails; the retry is stored once', async () => {
    await app.close();
    app = await buildApp(failingFirstWrites(store, 1));
    const failed = await post(goodBatch);
    expect(failed.statusCode).toBe(503);
    expect(failed.json()).toMatchObject({ code: 'STORE_UNAVAILABLE' });
    const retried = await post(goodBatch);
    expect(retried.statusCode).toBe(200);
    expect(retried.json()).toMatchObject({ stored: 3 });
    expect(await store.countSamples()).toBe(3);
  });
});

describe('HTTP batch ingest with an authentication hook', () => {
  it('lets the hook refuse a request before its body is read or stored', async () => {
    await app.close();
    app = fastify({ logger: false });
    registerHttpIngest(app, {
      store,
      clock: () => T0,
      options: { maxSamples: 10, maxFutureMs: 60_000 },
      async authenticate(request, reply) {
        if (request.headers.authorization !== 'Bearer plant-token') {
          await reply.code(401).send();
        }
      },
    });
    await app.ready();
    const refused = await post(goodBatch);
    expect(refused.statusCode).toBe(401);
    const allowed = await app.inject({
      method: 'POST',
      url: SAMPLES_ROUTE,
      headers: { 'content-type': 'application/json', authorization: 'Bearer plant-token' },
      payload: JSON.stringify(goodBatch),
    });
    expect(allowed.json()).toMatchObject({ stored: 3 });
    expect(await store.countSamples()).toBe(3);
    expect(await store.countQuarantine()).toBe(0);
  });
});

describe('HTTP batch ingest (listening on 127.0.0.1)', () => {
  it('takes batches over a real socket', async () => {
    await app.close();
    app = await buildApp(store, { maxSamples: 100, maxFutureMs: 60_000 });
    const address = await app.listen({ host: '127.0.0.1', port: 0 });
    const send = (body: string) =>
      fetch(`${address}${SAMPLES_ROUTE}`, {
        method: 'POST',
        headers: { 'content-type': 'application/json' },
        body,
        signal: AbortSignal.timeout(5000),
      });

    const good = await send(JSON.stringify(goodBatch));
    expect(good.status).toBe(200);
    expect(await good.json()).toMatchObject({ stored: 3 });

    const partly = await send(
      JSON.stringify([{ tag: 'kiln.temp', time: T0, value: 'hot' }, goodBatch[2]]),
    );
    expect(partly.status).toBe(200);
    expect(await partly.json()).toMatchObject({
      stored: 0,
      duplicates: 1,
      quarantined: 1,
      rejected: [expect.objectContaining({ index: 0, code: 'VALUE_NOT_NUMBER' })],
    });

    const notArray = await send('"readings"');
    expect(notArray.status).toBe(400);
    expect(await notArray.json()).toMatchObject({ code: 'PAYLOAD_SHAPE' });

    const oversized = await send(
      JSON.stringify([{ tag: 'x', time: T0, value: 1, pad: 'p'.repeat(60_000) }]),
    );
    expect(oversized.status).toBe(413);
    expect(await oversized.json()).toMatchObject({
      code: 'PAYLOAD_TOO_LARGE',
      message: errorCatalogue.PAYLOAD_TOO_LARGE.message,
    });
    expect(await store.countSamples()).toBe(3);
  });
});
