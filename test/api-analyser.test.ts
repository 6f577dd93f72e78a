/**
 * The API with the real rolling analyser behind it: samples in through POST /api/v1/samples, a mark
 * through the API, evidence and an alert out through the event stream and the evidence routes.
 */
import { afterEach, describe, expect, it } from 'vitest';
import { buildAnalyser } from '@trueshift/analyser-service';
import type { Analyser } from '@trueshift/analyser-service';
import { CAUTION } from '@trueshift/config';
import { seededRandom } from '@trueshift/stats';
import { captureLog } from './helpers/logs.js';
import { startTestApi, T0 } from './helpers/api.js';
import type { TestApi } from './helpers/api.js';
import { openSse } from './helpers/sse.js';

const HOUR = 3_600_000;
const TAG = 'evap1/steam-per-tonne';

describe('API with the analyser', () => {
  let api: TestApi | undefined;
  let analyser: Analyser | undefined;

  afterEach(async () => {
    await analyser?.close();
    await api?.close();
  });

  it('streams the evidence and alert of a real shift and serves its reference distribution', async () => {
    api = await startTestApi({
      around: (store, clock) => {
        analyser = buildAnalyser({
          store,
          clock,
          log: captureLog('warn').log,
          options: { pollMs: 0, alertTargets: [{ channel: 'mqtt', target: 'trueshift/alerts' }] },
        });
        return {
          events: analyser.events,
          health: async () => ({ analyser: { lag: (await analyser?.lag()) ?? 0 } }),
        };
      },
    });
    const a = api;
    const base = await a.listen();
    const post = (path: string, body: unknown, method = 'POST') =>
      fetch(`${base}${path}`, {
        method,
        headers: { ...a.as('write'), 'content-type': 'application/json' },
        body: JSON.stringify(body),
      });
    const get = async (path: string) =>
      (await (await fetch(`${base}${path}`, { headers: a.as('read') })).json()) as Record<
        string,
        unknown
      >;

    const rng = seededRandom(11);
    const start = T0 - 200 * HOUR;
    const markAt = start + 150 * HOUR;
    // The plant's clock runs with its samples, so the tag is never silent long enough to be stale.
    a.now.t = markAt;
    const history = Array.from({ length: 150 }, (_, i) => ({
      tag: TAG,
      t: start + i * HOUR,
      value: 2.4 + 0.05 * rng.normal(),
    }));
    expect(await (await post('/api/v1/samples', history)).json()).toMatchObject({ stored: 150 });
    // A quiet watch: this test is about the mark, not the tag's own false alarms.
    expect(
      (
        await post(
          `/api/v1/tags/${encodeURIComponent(TAG)}`,
          { settings: { inControlArl: 1e7 } },
          'PATCH',
        )
      ).status,
    ).toBe(200);
    await analyser?.drain();

    const created = await post('/api/v1/marks', {
      tags: [TAG],
      at: markAt,
      label: 'New steam trap',
      direction: 'fall',
    });
    const mark = (await created.json()) as { id: string };
    const stream = await openSse(`${base}/api/v1/events`, a.as('read'));
    await stream.waitForEvents(1);

    a.now.t = markAt + 12 * HOUR;
    const after = Array.from({ length: 12 }, (_, i) => ({
      tag: TAG,
      t: markAt + i * HOUR,
      value: 2.2 + 0.05 * rng.normal(),
    }));
    expect(await (await post('/api/v1/samples', after)).json()).toMatchObject({ stored: 12 });
    await analyser?.drain();

    await stream.waitUntil((events) => events.some((e) => e.event === 'alert'));
    expect(stream.events.filter((e) => e.event === 'alert')).toHaveLength(1);
    const kinds = stream.events.map((e) => e.event);
    expect(kinds[0]).toBe('connected');
    // Evidence for each evaluation, then the alert the third credible one opened.
    expect(kinds.indexOf('evidence')).toBeGreaterThan(0);
    expect(kinds.indexOf('alert')).toBeGreaterThan(kinds.indexOf('evidence'));
    const ids = stream.events.map((e) => Number(e.id));
    expect([...ids].sort((x, y) => x - y)).toEqual(ids);

    const latest = await get(`/api/v1/marks/${mark.id}/evidence/${encodeURIComponent(TAG)}`);
    expect(latest.caution).toBe(CAUTION);
    const snapshot = latest.evidence as {
      verdict: string;
      nAfter: number;
      body: { evidence: { nBefore: number; reference: { m: number }; observedShift: number } };
    };
    expect(snapshot.verdict).toBe('credible-fall');

    const reference = await get(
      `/api/v1/marks/${mark.id}/evidence/${encodeURIComponent(TAG)}/reference`,
    );
    expect(reference).toMatchObject({
      nHistory: 150,
      nAfter: snapshot.nAfter,
      nBefore: snapshot.body.evidence.nBefore,
      differences: snapshot.body.evidence.reference.m,
      observedShift: snapshot.body.evidence.observedShift,
    });

    const path = await get(`/api/v1/marks/${mark.id}/evidence/${encodeURIComponent(TAG)}/path`);
    expect((path.points as unknown[]).length).toBeGreaterThan(0);

    const open = (await get('/api/v1/alerts?state=open')).alerts as { id: number; kind: string }[];
    expect(open.map((x) => x.kind)).toContain('credible-shift');
    const credible = open.find((x) => x.kind === 'credible-shift');
    const before = stream.events.length;
    const ack = await post(`/api/v1/alerts/${credible?.id ?? 0}/acknowledge`, {
      note: 'Trap confirmed',
    });
    expect(ack.status).toBe(200);
    const [acknowledged] = (await stream.waitForEvents(before + 1)).slice(before);
    expect(acknowledged?.event).toBe('alert');
    expect(JSON.parse(acknowledged?.data ?? '{}')).toMatchObject({ change: 'acknowledged' });

    const ready = await fetch(`${base}/ready`);
    expect(await ready.json()).toMatchObject({ ready: true, checks: { analyser: { lag: 0 } } });
    stream.close();
  });
});
