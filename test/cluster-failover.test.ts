/**
 * Three instances of `trueshift start` (the built files, each its own process) share one
 * PostgreSQL database and one MQTT 5 shared subscription. One is killed with SIGKILL in the middle
 * of a QoS 1 stream of many tags; the others take its shards over when its leases expire, and it
 * comes back under the same name, so the broker hands over the messages its session still held.
 * Every sample must be stored once, every tag analysed up to its last sample, each credible-shift
 * alert opened once, and a client of one instance's event stream must see every opening, whichever
 * instance raised it.
 */
import { mkdir, mkdtemp, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { connectAsync } from 'mqtt';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { seededRandom } from '@trueshift/stats';
import { shardOf } from '@trueshift/store';
import { openPostgresStore } from '@trueshift/store-postgres';
import type { PostgresStore } from '@trueshift/store-postgres';
import { requireBuiltCli } from './helpers/cli-process.js';
import { startMosquitto } from './helpers/mosquitto.js';
import type { Mosquitto } from './helpers/mosquitto.js';
import { createTestDatabase } from './helpers/postgres.js';
import type { TestDatabase } from './helpers/postgres.js';
import { serviceProcess } from './helpers/service-process.js';
import type { ServiceProcess } from './helpers/service-process.js';
import { openSse } from './helpers/sse.js';
import type { SseClient } from './helpers/sse.js';
import { publishSteadily, seedMarkedTags } from './helpers/marked-stream.js';
import type { Published } from './helpers/marked-stream.js';
import { waitFor } from './helpers/store-faults.js';
import { startReceiver } from './helpers/webhook-receiver.js';
import type { WebhookReceiver } from './helpers/webhook-receiver.js';

const SHARDS = 16;
const NAMES = ['node-a', 'node-b', 'node-c'] as const;
const SHIFT_TAGS = ['mill/line1/fines', 'mill/line2/fines', 'mill/line3/fines'];
const LOAD_TAGS = Array.from({ length: 30 }, (_, i) => `mill/feeder${String(i)}/rate`);
const PER_LOAD_TAG = 120;
const HISTORY = 150;
const AFTER = 30;
const STEP = 1000;

let db: TestDatabase | undefined;
let broker: Mosquitto | undefined;
let receiver: WebhookReceiver | undefined;
let dir: string | undefined;
let observer: PostgresStore | undefined;
let stream: SseClient | undefined;
const nodes = new Map<string, ServiceProcess>();

beforeAll(async () => {
  requireBuiltCli();
  db = await createTestDatabase('cluster');
  broker = await startMosquitto();
  receiver = await startReceiver(() => 200);
  dir = await mkdtemp(join(tmpdir(), 'trueshift-cluster-'));
});

afterAll(async () => {
  stream?.close();
  for (const node of nodes.values()) await node.kill('SIGKILL').catch(() => undefined);
  await observer?.close();
  await receiver?.close();
  await broker?.dispose();
  await db?.drop();
  if (dir !== undefined) await rm(dir, { recursive: true, force: true });
});

async function owners(store: PostgresStore): Promise<Map<string, number[]>> {
  const now = Date.now();
  const byOwner = new Map<string, number[]>();
  for (const lease of await store.listLeases()) {
    if (lease.expiresAt <= now) continue;
    const list = byOwner.get(lease.owner) ?? [];
    list.push(lease.shard);
    byOwner.set(lease.owner, list);
  }
  return byOwner;
}

describe('three instances on one PostgreSQL database', () => {
  it('survives SIGKILL of one: every sample stored once, every tag analysed, each alert opened once', async () => {
    if (db === undefined || broker === undefined || receiver === undefined || dir === undefined)
      throw new Error('setup');
    const hooks = receiver;
    const mq = broker;
    const url = db.url;
    const start = Date.now() - 20 * 60_000;
    const markAt = start + HISTORY * STEP;
    const rng = seededRandom(31);

    // The schema, the shift tags' history and the mark are in place before any instance starts.
    const seed = await openPostgresStore({ url, shards: SHARDS, instance: 'test-seed' });
    observer = seed;
    const mark = await seedMarkedTags(seed, {
      tags: SHIFT_TAGS,
      start,
      step: STEP,
      history: HISTORY,
      level: 4.1,
      noise: 0.05,
      rng,
      label: 'new classifier vanes',
    });

    for (const name of NAMES) {
      const work = join(dir, name);
      await mkdir(work, { recursive: true });
      nodes.set(
        name,
        await serviceProcess({
          dir: work,
          brokerUrl: mq.url,
          clientId: 'cluster-ingest',
          settings: {
            store: { kind: 'postgres', url, shards: SHARDS, poolSize: 4 },
            cluster: { instance: name, leaseMs: 3000, renewMs: 500 },
            mqtt: { sharedGroup: 'trueshift' },
            webhooks: [{ url: hooks.url }],
            delivery: { baseDelayMs: 100, maxDelayMs: 1000 },
            analysis: { pollMs: 200 },
          },
        }),
      );
    }
    const node = (name: string): ServiceProcess => {
      const found = nodes.get(name);
      if (found === undefined) throw new Error(name);
      return found;
    };
    await Promise.all(NAMES.map((name) => node(name).start(60_000)));
    await waitFor(
      async () => {
        const held = await owners(seed);
        return (
          NAMES.every((n) => (held.get(n)?.length ?? 0) > 0) &&
          [...held.values()].flat().length === SHARDS
        );
      },
      'the shards shared out over the three instances',
      30_000,
    );

    stream = await openSse(`${node('node-a').base}/api/v1/events`, {});
    const openings = (): string[] =>
      (stream?.events ?? [])
        .filter((e) => e.event === 'alert')
        .map((e) => JSON.parse(e.data) as { change: string; alert: { kind: string; tag: string } })
        .filter((d) => d.change === 'opened' && d.alert.kind === 'credible-shift')
        .map((d) => d.alert.tag);

    const messages: Published[] = [];
    for (let i = 0; i < PER_LOAD_TAG; i++) {
      for (const tag of LOAD_TAGS) messages.push({ tag, t: start + i * STEP, value: rng.normal() });
      if (i % 4 === 0 && i / 4 < AFTER) {
        for (const tag of SHIFT_TAGS) {
          messages.push({ tag, t: markAt + (i / 4 + 1) * STEP, value: 4.6 });
        }
      }
    }
    const total = messages.length;
    const publisher = await connectAsync(mq.url, {
      clientId: 'cluster-publisher',
      protocolVersion: 5,
    });
    const publishing = publishSteadily(publisher, messages, { chunk: 50, pauseMs: 20 });

    const stored = (): Promise<number> => seed.countSamples();
    const seeded = HISTORY * SHIFT_TAGS.length;
    await waitFor(
      async () => (await stored()) >= seeded + total / 3,
      'a third of the stream stored',
      60_000,
    );
    const before = await owners(seed);
    const victimShards = before.get('node-b') ?? [];
    expect(victimShards.length).toBeGreaterThan(0);
    await node('node-b').kill('SIGKILL');

    // Once node-b's leases expire, the two others hold every shard between them.
    await waitFor(
      async () => {
        const held = await owners(seed);
        return !held.has('node-b') && [...held.values()].flat().length === SHARDS;
      },
      'node-b’s shards taken over',
      30_000,
    );
    // Back under the same name: its broker session hands over what it held when it died.
    await node('node-b').start(60_000);
    await publishing;
    await publisher.endAsync();

    await waitFor(
      async () => (await stored()) >= seeded + total,
      `all ${String(total)} samples stored`,
      90_000,
    );
    expect(await seed.countSamples()).toBe(seeded + total);
    expect(await seed.countQuarantine()).toBe(0);
    for (const tag of [...LOAD_TAGS.slice(0, 5), ...SHIFT_TAGS]) {
      const expected = messages.filter((m) => m.tag === tag);
      const from = SHIFT_TAGS.includes(tag) ? markAt : start;
      const columns = await seed.readSamples(tag, { from });
      expect(Array.from(columns.t)).toEqual(expected.map((m) => m.t));
      expect(Array.from(columns.value)).toEqual(expected.map((m) => m.value));
    }

    // Every tag analysed up to its last sample, by whichever instance holds its shard now.
    const lastSeqOf = new Map<string, number>();
    for (let after = 0; ;) {
      const page = await seed.samplesAfter(after, 10_000);
      if (page.length === 0) break;
      for (const s of page) lastSeqOf.set(s.tag, s.seq);
      after = page[page.length - 1]?.seq ?? after;
    }
    await waitFor(
      async () => {
        for (const [tag, seq] of lastSeqOf) {
          const key = `shard:${String(shardOf(tag, SHARDS))}/${String(SHARDS)}:tag:${tag}`;
          const state = await seed.loadAnalyserState(key);
          if (state === null || state.lastSeq < seq) return false;
        }
        return true;
      },
      'every tag analysed up to its last sample',
      60_000,
    );

    await waitFor(
      () => SHIFT_TAGS.every((tag) => openings().includes(tag)),
      'every credible-shift opening on node-a’s event stream',
      60_000,
    ).catch(async (error: unknown) => {
      const alerts = (await seed.listAlerts({ limit: 10_000 }))
        .filter((x) => x.kind === 'credible-shift')
        .map((x) => `${x.tag} ${x.state}`);
      for (const tag of SHIFT_TAGS) {
        const looks = await seed.listEvidenceSnapshots(mark.id, tag, { limit: 1000 });
        alerts.push(`${tag}: ${looks.map((l) => `${String(l.nAfter)} ${l.verdict}`).join(', ')}`);
      }
      const seen = (stream?.events ?? [])
        .filter((e) => e.event !== 'alert' || e.data.includes('credible-shift'))
        .map((e) => `${e.event} ${e.data.slice(0, 160)}`);
      throw new Error(`${String(error)}\nalerts: ${alerts.join('; ')}\nstream: ${seen.join('\n')}`);
    });
    const credible = (await seed.listAlerts()).filter((a) => a.kind === 'credible-shift');
    expect(credible.map((a) => a.tag).sort()).toEqual([...SHIFT_TAGS].sort());
    for (const alert of credible) expect(alert.markId).toBe(mark.id);
    // A client of one instance saw each opening once, though different instances raised them.
    expect(openings().sort()).toEqual([...SHIFT_TAGS].sort());
    const outbox = await seed.listOutbox({ limit: 10_000 });
    const keys = outbox.map((e) => `${e.channel} ${e.target} ${e.idempotencyKey}`);
    expect(new Set(keys).size).toBe(keys.length);
    for (const alert of credible) {
      const opened = `alert:${String(alert.id)}:opened:0`;
      expect(
        outbox.filter((e) => e.idempotencyKey === opened && e.channel === 'webhook'),
      ).toHaveLength(1);
    }
    await waitFor(
      () =>
        credible.every((alert) =>
          hooks
            .accepted()
            .some((r) => r.headers['idempotency-key'] === `alert:${String(alert.id)}:opened:0`),
        ),
      'each opening delivered to the webhook',
      30_000,
    );

    stream.close();
    stream = undefined;
    for (const name of NAMES) expect(await node(name).stop()).toBe(0);
    nodes.clear();
    // Shut down cleanly, each gave its shards back.
    expect((await owners(seed)).size).toBe(0);
  }, 300_000);
});
