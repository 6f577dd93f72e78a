/**
 * Alert delivery against real receivers on loopback: a node:http webhook that fails and recovers,
 * one that refuses, one that is down across a restart of the delivery loop, and the MQTT alert
 * topic on a real (embedded) broker. The clock and the loop's timers are the test's.
 */
import { createHmac } from 'node:crypto';
import { mkdtemp, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { connectAsync } from 'mqtt';
import { afterEach, beforeEach, describe, expect, it, vi } from 'vitest';
import { pino } from 'pino';
import { buildDelivery, outboxTargets } from '@trueshift/delivery';
import type { DeliveryDeps } from '@trueshift/delivery';
import { startEmbeddedBroker } from '@trueshift/ingest';
import type { AlertInput, OutboxChannel } from '@trueshift/store';
import { openSqliteStore } from '@trueshift/store-sqlite';
import type { SqliteStore } from '@trueshift/store-sqlite';
import { buildApi, issueToken } from '@trueshift/api';
import { startTestApi, testConfig, T0 } from './helpers/api.js';
import { manualTimers } from './helpers/manual-timers.js';
import { startReceiver } from './helpers/webhook-receiver.js';
import type { WebhookReceiver } from './helpers/webhook-receiver.js';

const log = pino({ level: process.env.TRUESHIFT_TEST_LOG ?? 'silent' });
const OPTIONS = { maxAttempts: 4, baseDelayMs: 1000, maxDelayMs: 5000 };

function alert(n: number): AlertInput {
  return {
    tag: 'evap1.steam',
    markId: null,
    kind: 'stale',
    dedupeKey: `stale:evap1.steam:${n}`,
    title: `evap1.steam: no sample (${n})`,
    at: T0,
    evidence: { n },
  };
}

function only(channel: OutboxChannel, target: string) {
  return [{ channel, target, createdAt: T0 }];
}

describe('alert delivery', () => {
  let dir: string;
  let path: string;
  let store: SqliteStore;
  const now = { t: T0 };
  const receivers: WebhookReceiver[] = [];

  beforeEach(async () => {
    dir = await mkdtemp(join(tmpdir(), 'trueshift-delivery-'));
    path = join(dir, 'store.db');
    store = openSqliteStore({ path });
    now.t = T0;
  });

  afterEach(async () => {
    await Promise.all(receivers.splice(0).map((r) => r.close()));
    await store.close();
    await rm(dir, { recursive: true, force: true });
  });

  function delivery(extra: Partial<DeliveryDeps> = {}) {
    return buildDelivery({
      store,
      clock: () => now.t,
      log,
      options: OPTIONS,
      // The largest delay every time, so the schedule is exact.
      random: () => 1,
      timers: manualTimers(),
      ...extra,
    });
  }

  it('retries a receiver that fails with 500 until it recovers; the alert arrives once, with one key', async () => {
    const receiver = await startReceiver((n) => (n <= 2 ? 500 : 200));
    receivers.push(receiver);
    const { alert: raised } = await store.raiseAlert(alert(1), only('webhook', receiver.url));
    const loop = delivery();

    expect(await loop.drainOnce()).toMatchObject({ attempted: 1, retrying: 1 });
    let [entry] = await store.listOutbox();
    expect(entry).toMatchObject({
      state: 'pending',
      attempts: 1,
      lastError: 'HTTP 500 Internal Server Error',
      nextAttemptAt: T0 + 1000,
    });
    // Not due yet: nothing is sent.
    now.t = T0 + 999;
    expect(await loop.drainOnce()).toMatchObject({ attempted: 0 });

    now.t = T0 + 1000;
    expect(await loop.drainOnce()).toMatchObject({ attempted: 1, retrying: 1 });
    [entry] = await store.listOutbox();
    // Back-off doubles: 1 s, then 2 s.
    expect(entry?.nextAttemptAt).toBe(T0 + 1000 + 2000);

    now.t = T0 + 3000;
    expect(await loop.drainOnce()).toMatchObject({ attempted: 1, delivered: 1 });
    now.t = T0 + 60_000;
    expect(await loop.drainOnce()).toMatchObject({ attempted: 0 });

    expect(receiver.requests).toHaveLength(3);
    expect(receiver.accepted()).toHaveLength(1);
    const key = `alert:${raised.id}:opened:0`;
    for (const request of receiver.requests) {
      expect(request.method).toBe('POST');
      expect(request.headers['idempotency-key']).toBe(key);
      expect(request.headers['content-type']).toBe('application/json');
      expect(JSON.parse(request.body)).toMatchObject({
        idempotencyKey: key,
        change: 'opened',
        alert: { id: raised.id },
      });
    }
    // Every attempt carried the same body, so a receiver can compare or sign-check it.
    expect(new Set(receiver.requests.map((r) => r.body)).size).toBe(1);
    expect((await store.listOutbox())[0]).toMatchObject({
      state: 'delivered',
      deliveredAt: T0 + 3000,
      attempts: 2,
    });
  });

  it('does not retry a 400 and reports the entry dead through the API', async () => {
    const receiver = await startReceiver(() => 400);
    receivers.push(receiver);
    await store.raiseAlert(alert(1), only('webhook', receiver.url));
    const loop = delivery();
    expect(await loop.drainOnce()).toMatchObject({ attempted: 1, dead: 1 });
    now.t = T0 + 10 * 60_000;
    expect(await loop.drainOnce()).toMatchObject({ attempted: 0 });
    expect(receiver.requests).toHaveLength(1);

    // The API over the same store shows the dead entry to an admin.
    const app = await buildApi({ store, config: testConfig(), clock: () => now.t, log });
    const { secret } = await issueToken(store, 'admin', ['admin'], T0);
    try {
      const response = await app.inject({
        method: 'GET',
        url: '/api/v1/outbox?state=dead',
        headers: { authorization: `Bearer ${secret}` },
      });
      expect(response.json()).toMatchObject({
        entries: [
          { state: 'dead', attempts: 1, lastError: 'HTTP 400 Bad Request', target: receiver.url },
        ],
      });
    } finally {
      await app.close();
    }
  });

  it('retries 408 and 429, waiting as long as Retry-After asks, and gives up after the last attempt', async () => {
    const receiver = await startReceiver((n) =>
      n === 1 ? { status: 429, headers: { 'retry-after': '4' } } : 408,
    );
    receivers.push(receiver);
    await store.raiseAlert(alert(1), only('webhook', receiver.url));
    const loop = delivery();
    await loop.drainOnce();
    expect((await store.listOutbox())[0]).toMatchObject({
      state: 'pending',
      nextAttemptAt: T0 + 4000,
    });
    for (const at of [T0 + 4000, T0 + 6000, T0 + 10_000]) {
      now.t = at;
      await loop.drainOnce();
    }
    // Attempts 2 and 3 waited 2 s and 4 s; the 4th (maxAttempts) failure is the last.
    expect((await store.listOutbox())[0]).toMatchObject({
      state: 'dead',
      attempts: 4,
      lastError: 'HTTP 408 Request Timeout',
    });
    expect(receiver.requests).toHaveLength(4);
  });

  it('signs the body when the webhook has a secret', async () => {
    const receiver = await startReceiver(() => 204);
    receivers.push(receiver);
    const secret = 'a-webhook-secret-of-some-length';
    await store.raiseAlert(alert(1), only('webhook', receiver.url));
    await delivery({ webhooks: [{ url: receiver.url, secret }] }).drainOnce();
    const [request] = receiver.requests;
    const expected = `sha256=${createHmac('sha256', secret)
      .update(request?.body ?? '')
      .digest('hex')}`;
    expect(request?.headers['trueshift-signature']).toBe(expected);
  });

  it('delivers after a restart what a down receiver missed, once', async () => {
    // The receiver is down: nothing listens on its port.
    const probe = await startReceiver(() => 200);
    const port = probe.port;
    await probe.close();
    const url = `http://127.0.0.1:${port}/hooks/alerts`;
    const { alert: raised } = await store.raiseAlert(alert(1), only('webhook', url));
    await store.raiseAlert(alert(2), only('webhook', url));

    const timers = manualTimers();
    const first = delivery({ timers });
    first.start();
    expect(timers.fireAll()).toBe(1);
    await vi.waitFor(async () => {
      expect((await store.listOutbox({ state: 'pending' }))[1]).toMatchObject({ attempts: 1 });
    });
    // The failed entry holds back the one behind it to the same receiver.
    const pending = await store.listOutbox({ state: 'pending' });
    expect(pending.map((e) => e.attempts).sort()).toEqual([0, 1]);
    expect(pending.find((e) => e.attempts === 1)?.lastError).toMatch(/fetch failed|ECONNREFUSED/);
    await first.stop();
    await store.close();

    // The process comes back: a new store handle on the same file, a new loop, the receiver is up.
    const receiver = await startReceiver(() => 200, port);
    receivers.push(receiver);
    store = openSqliteStore({ path });
    now.t = T0 + 5000;
    const laterTimers = manualTimers();
    const second = delivery({ timers: laterTimers });
    second.start();
    laterTimers.fireAll();
    await vi.waitFor(async () => {
      expect(await store.countOutbox()).toEqual({ pending: 0, delivered: 2, dead: 0 });
    });
    await second.stop();
    expect(receiver.accepted().map((r) => r.headers['idempotency-key'])).toEqual([
      `alert:${raised.id}:opened:0`,
      `alert:${raised.id + 1}:opened:0`,
    ]);
  });

  it('publishes to the MQTT alert topic at QoS 1, and holds what comes while the broker is down', async () => {
    let broker = await startEmbeddedBroker();
    const port = broker.port;
    const subscriber = await connectAsync(broker.url, {
      protocolVersion: 4,
      clientId: 'alert-listener',
      reconnectPeriod: 50,
    });
    const publisher = await connectAsync(broker.url, {
      protocolVersion: 4,
      clientId: 'trueshift-delivery',
      reconnectPeriod: 50,
    });
    const received: { topic: string; payload: string; qos: number }[] = [];
    subscriber.on('message', (topic, payload, packet) => {
      received.push({ topic, payload: payload.toString('utf8'), qos: packet.qos });
    });
    await subscriber.subscribeAsync('trueshift/alerts', { qos: 1 });
    // What the service passes in: refuse at once while disconnected, or resolve on PUBACK.
    const publishMqtt = async (topic: string, payload: string): Promise<void> => {
      if (!publisher.connected) throw new Error('not connected to the MQTT broker');
      await publisher.publishAsync(topic, payload, { qos: 1 });
    };
    try {
      const targets = outboxTargets(testConfig(), T0);
      expect(targets).toEqual([{ channel: 'mqtt', target: 'trueshift/alerts', createdAt: T0 }]);
      const { alert: raised } = await store.raiseAlert(alert(1), targets);
      const loop = delivery({ publishMqtt });
      expect(await loop.drainOnce()).toMatchObject({ delivered: 1 });
      await vi.waitFor(() => {
        expect(received).toHaveLength(1);
      });
      expect(received[0]?.qos).toBe(1);
      expect(JSON.parse(received[0]?.payload ?? '')).toMatchObject({
        idempotencyKey: `alert:${raised.id}:opened:0`,
        change: 'opened',
      });

      await broker.close();
      await vi.waitFor(() => {
        expect(publisher.connected).toBe(false);
      });
      await store.acknowledgeAlert(raised.id, 'token:op', 'seen', T0 + 1, targets);
      expect(await loop.drainOnce()).toMatchObject({ retrying: 1 });
      expect((await store.listOutbox({ state: 'pending' }))[0]?.lastError).toBe(
        'not connected to the MQTT broker',
      );

      broker = await startEmbeddedBroker({ port });
      await vi.waitFor(() => {
        expect(publisher.connected && subscriber.connected).toBe(true);
      });
      // The embedded broker forgot every session; the listener subscribes again before the retry.
      await subscriber.subscribeAsync('trueshift/alerts', { qos: 1 });
      now.t = T0 + 1000;
      expect(await loop.drainOnce()).toMatchObject({ delivered: 1 });
      await vi.waitFor(() => {
        expect(received.map((r) => (JSON.parse(r.payload) as { change: string }).change)).toEqual([
          'opened',
          'acknowledged',
        ]);
      });
    } finally {
      await subscriber.endAsync(true);
      await publisher.endAsync(true);
      await broker.close();
    }
  });

  it('delivers an acknowledgement made through the API to the configured webhook', async () => {
    const receiver = await startReceiver(() => 200);
    receivers.push(receiver);
    let woken = 0;
    const api = await startTestApi({
      config: { webhooks: [{ url: receiver.url }] },
      deps: { wakeDelivery: () => void (woken += 1) },
    });
    try {
      const targets = outboxTargets(api.config, T0).filter((t) => t.channel === 'webhook');
      const { alert: raised } = await api.store.raiseAlert(alert(1), targets);
      const ack = await api.app.inject({
        method: 'POST',
        url: `/api/v1/alerts/${raised.id}/acknowledge`,
        headers: api.as('write'),
        payload: { note: 'On it' },
      });
      expect(ack.statusCode).toBe(200);
      expect(woken).toBe(1);
      const loop = buildDelivery({
        store: api.store,
        clock: () => api.now.t,
        log,
        options: api.config.delivery,
        timers: manualTimers(),
        publishMqtt: () => Promise.resolve(),
      });
      expect(await loop.drainOnce()).toMatchObject({ delivered: 3 });
      const bodies = receiver
        .accepted()
        .map((r) => JSON.parse(r.body) as { change: string; alert: { note: string | null } });
      expect(bodies.map((b) => b.change)).toEqual(['opened', 'acknowledged']);
      expect(bodies[1]?.alert.note).toBe('On it');
    } finally {
      await api.close();
    }
  });
});
