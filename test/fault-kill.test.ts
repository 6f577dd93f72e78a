/**
 * The whole service as its own process (`trueshift start` on the built files), killed with SIGKILL
 * in the middle of a QoS 1 stream and started again with the same client id: the broker keeps the
 * session, so every published sample must end up in the store exactly once, and the credible-shift
 * alert of a marked tag must open once, with its outbox entries not duplicated.
 */
import { mkdtemp, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { connectAsync } from 'mqtt';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { seededRandom } from '@trueshift/stats';
import { openSqliteStore } from '@trueshift/store-sqlite';
import { requireBuiltCli } from './helpers/cli-process.js';
import { startMosquitto } from './helpers/mosquitto.js';
import type { Mosquitto } from './helpers/mosquitto.js';
import { serviceProcess } from './helpers/service-process.js';
import type { ServiceProcess } from './helpers/service-process.js';
import { publishSteadily, seedMarkedTags } from './helpers/marked-stream.js';
import type { Published } from './helpers/marked-stream.js';
import { waitFor } from './helpers/store-faults.js';
import { startReceiver } from './helpers/webhook-receiver.js';
import type { WebhookReceiver } from './helpers/webhook-receiver.js';

const SHIFT_TAG = 'kill/shift';
const LOAD_TAGS = Array.from({ length: 8 }, (_, i) => `kill/load${String(i)}`);
const PER_LOAD_TAG = 500;
const HISTORY = 150;
const AFTER = 40;
const STEP = 1000;

interface Delivered {
  change?: string;
  alert?: { kind?: string; tag?: string };
}

/** The credible-shift openings the receiver took in; other alerts (stale load tags) are not ours. */
function credibleOpenings(receiver: WebhookReceiver): WebhookReceiver['requests'] {
  return receiver.accepted().filter((r) => {
    const body = JSON.parse(r.body) as Delivered;
    return body.change === 'opened' && body.alert?.kind === 'credible-shift';
  });
}

let broker: Mosquitto | undefined;
let receiver: WebhookReceiver | undefined;
let dir: string | undefined;
let running: ServiceProcess | undefined;

beforeAll(async () => {
  requireBuiltCli();
  broker = await startMosquitto();
  receiver = await startReceiver(() => 200);
  dir = await mkdtemp(join(tmpdir(), 'trueshift-fault-kill-'));
});

afterAll(async () => {
  // A failed run must not leave a service behind holding the port and the file.
  if (running !== undefined) await running.kill('SIGKILL').catch(() => undefined);
  await receiver?.close();
  await broker?.dispose();
  if (dir !== undefined) await rm(dir, { recursive: true, force: true });
});

describe('the service killed mid-stream', () => {
  it('stores every QoS 1 sample once after SIGKILL and a restart, and opens the alert once', async () => {
    if (broker === undefined || receiver === undefined || dir === undefined)
      throw new Error('setup');
    const hooks = receiver;
    const mq = broker;
    const work = dir;
    const service = await serviceProcess({
      dir: work,
      brokerUrl: mq.url,
      clientId: 'fault-kill-ingest',
      settings: {
        webhooks: [{ url: hooks.url }],
        delivery: { baseDelayMs: 100, maxDelayMs: 1000 },
        analysis: { pollMs: 200 },
      },
    });
    const { storePath } = service;
    // Sample times lie a few minutes back, so none is refused as coming from the future and the
    // marked tag's history and after-window sit in one known order.
    const start = Date.now() - 20 * 60_000;
    const markAt = start + HISTORY * STEP;
    const rng = seededRandom(9);

    const seed = openSqliteStore({ path: storePath });
    const mark = await seedMarkedTags(seed, {
      tags: [SHIFT_TAG],
      start,
      step: STEP,
      history: HISTORY,
      level: 2.4,
      noise: 0.05,
      rng,
      label: 'new catalyst',
    });
    await seed.close();

    running = service;
    const stored = (): Promise<number> => service.metric('trueshift_samples_ingested_total');
    await service.start();

    // Load tags interleaved with the marked tag's after-window, in time order per tag.
    const messages: Published[] = [];
    for (let i = 0; i < PER_LOAD_TAG; i++) {
      for (const tag of LOAD_TAGS) messages.push({ tag, t: start + i * STEP, value: rng.normal() });
      if (i % 12 === 0 && i / 12 < AFTER) {
        messages.push({ tag: SHIFT_TAG, t: markAt + (i / 12 + 1) * STEP, value: 2.9 });
      }
    }
    const total = messages.length;
    const publisher = await connectAsync(mq.url, {
      clientId: 'fault-kill-publisher',
      protocolVersion: 5,
    });
    let published = 0;
    const publishing = publishSteadily(publisher, messages, {
      chunk: 100,
      pauseMs: 15,
      onProgress: (n) => (published = n),
    });

    await waitFor(
      async () => (await stored()) >= HISTORY + total / 4,
      'a quarter of the stream stored',
      60_000,
    );
    await service.kill('SIGKILL');
    const publishedAtKill = published;
    await service.start();
    await publishing;
    await publisher.endAsync();

    await waitFor(
      async () => (await stored()) >= HISTORY + total,
      `all ${String(total)} samples stored (${service.stderr()})`,
      60_000,
    );
    await waitFor(
      () => credibleOpenings(hooks).length > 0,
      'the credible-shift alert delivered to the webhook',
      30_000,
    );
    expect(await service.stop()).toBe(0);
    running = undefined;

    const store = openSqliteStore({ path: storePath });
    try {
      expect(await store.countSamples()).toBe(HISTORY + total);
      expect(await store.countQuarantine()).toBe(0);
      for (const tag of LOAD_TAGS) {
        const columns = await store.readSamples(tag);
        const expected = messages.filter((m) => m.tag === tag);
        expect(Array.from(columns.t)).toEqual(expected.map((m) => m.t));
        expect(Array.from(columns.value)).toEqual(expected.map((m) => m.value));
      }
      expect(await store.countSamples(SHIFT_TAG)).toBe(HISTORY + AFTER);

      const credible = (await store.listAlerts()).filter((a) => a.kind === 'credible-shift');
      expect(credible).toHaveLength(1);
      expect(credible[0]).toMatchObject({ tag: SHIFT_TAG, markId: mark.id });
      const outbox = await store.listOutbox({ limit: 10_000 });
      const keys = outbox.map((e) => `${e.channel} ${e.target} ${e.idempotencyKey}`);
      expect(new Set(keys).size).toBe(keys.length);
      const opened = `alert:${String(credible[0]?.id)}:opened:0`;
      expect(
        outbox.filter((e) => e.idempotencyKey === opened && e.channel === 'webhook'),
      ).toHaveLength(1);
      // At least once: a delivery retried around the kill may arrive twice, always with one key.
      const deliveredKeys = hooks.accepted().map((r) => r.headers['idempotency-key']);
      expect(deliveredKeys).toContain(opened);
      const openings = credibleOpenings(hooks);
      expect(new Set(openings.map((r) => r.headers['idempotency-key']))).toEqual(new Set([opened]));
      console.info(
        `fault-kill: ${String(total)} published, ${String(publishedAtKill)} when killed, ` +
          `${String(outbox.length)} outbox entries, ${String(openings.length)} deliveries of the opening`,
      );
    } finally {
      await store.close();
    }
  }, 150_000);
});
