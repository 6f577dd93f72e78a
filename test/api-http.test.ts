/**
 * The API over a real listening socket on 127.0.0.1: the same answers as through inject, the
 * body limit on a real upload, and the event stream with its resume from Last-Event-ID.
 */
import { EventEmitter } from 'node:events';
import { request } from 'node:http';
import { afterEach, describe, expect, it } from 'vitest';
import { listenApi } from '@trueshift/api';
import { errorCatalogue } from '@trueshift/errors';
import { startTestApi, T0 } from './helpers/api.js';
import type { TestApi } from './helpers/api.js';
import { openSse } from './helpers/sse.js';
import type { SseEvent } from './helpers/sse.js';

const MINUTE = 60_000;

/** A raw request with a streamed body, so the server sees a real upload of the given size. */
function upload(
  url: string,
  headers: Record<string, string>,
  size: number,
): Promise<{ status: number; body: string }> {
  return new Promise((resolve, reject) => {
    const req = request(
      url,
      { method: 'POST', headers: { ...headers, 'content-type': 'application/json' } },
      (res) => {
        let text = '';
        res.setEncoding('utf8');
        res.on('data', (chunk: string) => (text += chunk));
        res.on('end', () => {
          resolve({ status: res.statusCode ?? 0, body: text });
        });
      },
    );
    // The server may answer and close before the whole upload is written; that is the point.
    req.on('error', (error: NodeJS.ErrnoException) => {
      if (error.code !== 'EPIPE' && error.code !== 'ECONNRESET') reject(error);
    });
    const chunk = ' '.repeat(64 * 1024);
    req.write('[');
    let sent = 1;
    const pump = (): void => {
      while (sent < size) {
        sent += chunk.length;
        if (!req.write(chunk)) {
          req.once('drain', pump);
          return;
        }
      }
      req.end(']');
    };
    pump();
  });
}

function dataOf(event: SseEvent | undefined): Record<string, unknown> {
  return JSON.parse(event?.data ?? 'null') as Record<string, unknown>;
}

describe('API over a real socket', () => {
  let api: TestApi | undefined;

  afterEach(async () => {
    await api?.close();
    api = undefined;
  });

  it('binds to the configured host, loopback by default', async () => {
    api = await startTestApi();
    await listenApi(api.app, api.config);
    const address = api.app.server.address();
    expect(typeof address === 'object' && address?.address).toBe('127.0.0.1');
  });

  it('answers routes, refusals and errors with catalogue bodies', async () => {
    api = await startTestApi();
    const base = await api.listen();
    const json = { 'content-type': 'application/json' };

    const anonymous = await fetch(`${base}/api/v1/tags`);
    expect(anonymous.status).toBe(401);
    expect(await anonymous.json()).toMatchObject({ code: 'UNAUTHORIZED' });

    const ingest = await fetch(`${base}/api/v1/samples`, {
      method: 'POST',
      headers: { ...api.as('write'), ...json },
      body: JSON.stringify([{ tag: 'evap1.steam', t: T0 - MINUTE, value: 12.5 }]),
    });
    expect(await ingest.json()).toMatchObject({ stored: 1 });

    const forbidden = await fetch(`${base}/api/v1/marks`, {
      method: 'POST',
      headers: { ...api.as('read'), ...json },
      body: JSON.stringify({ tags: ['evap1.steam'], at: T0, label: 'x', direction: 'fall' }),
    });
    expect(forbidden.status).toBe(403);

    const malformed = await fetch(`${base}/api/v1/marks`, {
      method: 'POST',
      headers: { ...api.as('write'), ...json },
      body: '{"tags": [',
    });
    expect(malformed.status).toBe(400);
    expect(await malformed.json()).toMatchObject({ code: 'PAYLOAD_NOT_JSON' });

    const unknownField = await fetch(`${base}/api/v1/marks`, {
      method: 'POST',
      headers: { ...api.as('write'), ...json },
      body: JSON.stringify({
        tags: ['evap1.steam'],
        at: T0,
        label: 'x',
        direction: 'fall',
        by: 'me',
      }),
    });
    expect(await unknownField.json()).toMatchObject({ code: 'REQUEST_INVALID' });

    const created = await fetch(`${base}/api/v1/marks`, {
      method: 'POST',
      headers: { ...api.as('write'), ...json },
      body: JSON.stringify({ tags: ['evap1.steam'], at: T0, label: 'New trap', direction: 'fall' }),
    });
    expect(created.status).toBe(201);
    const { id } = (await created.json()) as { id: string };
    const one = await fetch(`${base}/api/v1/marks/${id}`, { headers: api.as('read') });
    expect(await one.json()).toMatchObject({ mark: { id, label: 'New trap' } });

    const tags = await fetch(`${base}/api/v1/tags/evap1.steam/samples`, {
      headers: api.as('read'),
    });
    expect(await tags.json()).toMatchObject({ samples: { value: [12.5] } });

    const missing = await fetch(`${base}/api/v1/nothing-here`, { headers: api.as('read') });
    expect(missing.status).toBe(404);
    expect(await missing.json()).toMatchObject({ code: 'NOT_FOUND' });

    const doc = (await (await fetch(`${base}/api/v1/openapi.json`)).json()) as { paths: object };
    expect(Object.keys(doc.paths)).toContain('/api/v1/events');

    const metrics = await fetch(`${base}/metrics`, { headers: api.as('read') });
    expect(await metrics.text()).toContain('trueshift_samples_ingested_total 1');
  });

  it('refuses a real upload over the body limit with 413 and the catalogue body', async () => {
    api = await startTestApi({
      config: { http: { host: '127.0.0.1', port: 0, bodyLimitBytes: 4096 } },
    });
    const base = await api.listen();
    for (const path of ['/api/v1/marks', '/api/v1/samples']) {
      const answer = await upload(`${base}${path}`, api.as('write'), 256 * 1024);
      expect(answer.status).toBe(413);
      expect(JSON.parse(answer.body)).toMatchObject({
        code: 'PAYLOAD_TOO_LARGE',
        message: errorCatalogue.PAYLOAD_TOO_LARGE.message,
      });
    }
  });

  it('streams events, resumes from Last-Event-ID, and asks for a reload past the ring', async () => {
    const analyser = new EventEmitter();
    api = await startTestApi({
      deps: { events: analyser },
      api: { eventRingSize: 4, heartbeatMs: 50, retryMs: 1500 },
    });
    const base = await api.listen();
    const url = `${base}/api/v1/events`;
    await api.store.writeSamples([
      { tag: 'a', t: T0 - MINUTE, value: 1, quality: 192, source: 'test', receivedAt: T0 },
    ]);

    expect((await openSse(url, {})).status).toBe(401);

    const first = await openSse(url, api.as('read'));
    expect(first.status).toBe(200);
    expect(first.headers['content-type']).toBe('text/event-stream; charset=utf-8');
    const [hello] = await first.waitForEvents(1);
    expect(hello?.event).toBe('connected');
    expect(first.retry).toBe(1500);

    // An API write and two analyser changes.
    const mark = await fetch(`${base}/api/v1/marks`, {
      method: 'POST',
      headers: { ...api.as('write'), 'content-type': 'application/json' },
      body: JSON.stringify({ tags: ['a'], at: T0, label: 'trap', direction: 'rise' }),
    });
    expect(mark.status).toBe(201);
    analyser.emit('evidence', { markId: 'm', tag: 'a', risk: 0.2 });
    analyser.emit('alert', { change: 'opened', alert: { id: 1 } });
    const seen = await first.waitForEvents(4);
    expect(seen.slice(1).map((e) => e.event)).toEqual(['mark', 'evidence', 'alert']);
    const ids = seen.map((e) => Number(e.id));
    const first0 = ids[0] ?? Number.NaN;
    expect(ids.slice(1)).toEqual([first0 + 1, first0 + 2, first0 + 3]);
    const alertId = ids[3] ?? Number.NaN;
    expect(dataOf(seen[2])).toMatchObject({ markId: 'm', risk: 0.2, publishedAt: T0 });
    await first.waitForComment('heartbeat');
    first.close();

    // Missed while away: two more events; the client resumes after the evidence event.
    analyser.emit('evidence', { markId: 'm', tag: 'a', risk: 0.1 });
    analyser.emit('alert', { change: 'repeated', alert: { id: 1 } });
    const resumed = await openSse(url, { ...api.as('read'), 'last-event-id': seen[2]?.id ?? '' });
    const replay = await resumed.waitForEvents(3);
    expect(replay.map((e) => [Number(e.id), e.event])).toEqual([
      [alertId, 'alert'],
      [alertId + 1, 'evidence'],
      [alertId + 2, 'alert'],
    ]);
    expect(dataOf(replay[2])).toMatchObject({ change: 'repeated' });
    // Live events keep coming on the resumed stream, without repeats.
    analyser.emit('evidence', { markId: 'm', tag: 'a', risk: 0.05 });
    const live = await resumed.waitForEvents(4);
    expect(Number(live[3]?.id)).toBe(alertId + 3);
    resumed.close();

    // The query parameter does the same, for clients that cannot set headers.
    const byQuery = await openSse(`${url}?lastEventId=${alertId + 2}`, api.as('read'));
    expect((await byQuery.waitForEvents(1)).map((e) => Number(e.id))).toEqual([alertId + 3]);
    byQuery.close();

    // Older than the ring of 4: the client is told to reload, with the newest id to go on from.
    const tooOld = await openSse(url, { ...api.as('read'), 'last-event-id': String(ids[0]) });
    const [reload] = await tooOld.waitForEvents(1);
    expect(reload?.event).toBe('reload');
    expect(Number(reload?.id)).toBe(alertId + 3);
    expect(dataOf(reload).reason).toContain('older than the 4 events kept');
    tooOld.close();

    // An id from another run of the server (larger than any here) also means reload.
    const future = await openSse(url, {
      ...api.as('read'),
      'last-event-id': String(alertId + 1000),
    });
    expect((await future.waitForEvents(1))[0]?.event).toBe('reload');

    // Closing the server ends open streams instead of waiting for them.
    const closing = api.app.close();
    await future.ended;
    await closing;
  });
});
