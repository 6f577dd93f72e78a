import { createValidRanges } from '@trueshift/ingest';
import { EventEmitter } from 'node:events';
import { setTimeout as sleep } from 'node:timers/promises';
import { TrueshiftError } from '@trueshift/errors';
import {
  createSparkplugSession,
  SPARKPLUG_NAMESPACE,
  type SparkplugEvent,
  type SparkplugNodeSummary,
  sparkplugOptionProblems,
  type SparkplugSkipped,
} from '@trueshift/sparkplug';
import type { QuarantineInput, SampleInput, Store } from '@trueshift/store';
import { connect, type IClientOptions, type IPublishPacket, type MqttClient } from 'mqtt';
import type { Logger } from 'pino';

export interface SparkplugIngestOptions {
  /** mqtt://host:port or mqtts://host:port. */
  url: string;
  clientId: string;
  /** Sparkplug group ids; spBv1.0/<group>/# is subscribed for each. */
  groups: readonly string[];
  /** See SparkplugSessionOptions.tagTemplate; '{group}/{node}/{device}/{metric}' by default. */
  tagTemplate?: string;
  username?: string;
  password?: string;
  /** 5 by default; 4 (MQTT 3.1.1) for brokers without MQTT 5. */
  protocolVersion?: 4 | 5;
  maxFutureMs?: number;
  maxPayloadBytes?: number;
  /** Delay between reconnection attempts; 1000 ms by default. */
  reconnectMs?: number;
  connectTimeoutMs?: number;
  keepaliveSec?: number;
  /** Samples and rejections waiting for the store above which reading from the broker pauses; 50 000. */
  highWater?: number;
  /** How old the in-memory copy of the tags' valid ranges may get; 60 s by default. */
  rangeRefreshMs?: number;
}

export interface SparkplugIngestDeps {
  store: Store;
  log: Pick<Logger, 'info' | 'warn' | 'error' | 'debug'>;
  clock: () => number;
  options: SparkplugIngestOptions;
}

export interface SparkplugIngestStats {
  connected: boolean;
  /** MQTT messages taken in. */
  received: number;
  /** Live samples handed to the store, stale markers included. */
  samples: number;
  /** is_historical samples handed to the store. */
  backfill: number;
  /** Of both: newly stored, replays of stored ones, and different values for a stored time. */
  inserted: number;
  duplicates: number;
  conflicts: number;
  quarantined: number;
  skipped: SparkplugSkipped;
  seqGaps: number;
  births: number;
  deathsMatched: number;
  deathsIgnored: number;
  staleTags: number;
  stateMessages: number;
  /** Messages left alone: commands, groups not configured. */
  ignored: number;
  storeFailures: number;
  lastError: string | null;
  /** Samples and rejections received but not yet committed. */
  pending: number;
  nodes: SparkplugNodeSummary[];
}

type EventOf<T extends SparkplugEvent['type']> = Extract<SparkplugEvent, { type: T }>;

/** What `events` emits, each after the samples of its message are committed. */
export interface SparkplugIngestEventMap {
  /** A matched NDEATH or a DDEATH: these tags are stale now (for the data-quality watch). */
  'stale-tags': [EventOf<'stale-tags'>];
  'seq-gap': [EventOf<'seq-gap'>];
  birth: [EventOf<'birth'>];
  death: [EventOf<'death'>];
  state: [EventOf<'state'>];
}

export interface SparkplugIngest {
  readonly events: EventEmitter<SparkplugIngestEventMap>;
  /** Starts connecting; resolves once the first attempt is under way, not when it succeeds. */
  start(): Promise<void>;
  /** Resolves when connected and subscribed; rejects after timeoutMs. */
  ready(timeoutMs?: number): Promise<void>;
  /** Resolves when everything received so far is committed to the store. */
  idle(): Promise<void>;
  /** Commits what was received, then disconnects. */
  close(): Promise<void>;
  stats(): SparkplugIngestStats;
}

interface Batch {
  samples: SampleInput[];
  backfill: SampleInput[];
  rejected: QuarantineInput[];
  events: SparkplugEvent[];
}

const emptyBatch = (): Batch => ({ samples: [], backfill: [], rejected: [], events: [] });
const batchSize = (batch: Batch): number =>
  batch.samples.length + batch.backfill.length + batch.rejected.length + batch.events.length;

function describe(error: unknown): string {
  return error instanceof Error ? error.message : String(error);
}

/**
 * Takes Sparkplug B edge nodes' tags into the store, as a Host Application that only listens: it
 * publishes nothing (no STATE of its own, no rebirth request), so it cannot disturb the plant.
 *
 * Delivery: Sparkplug publishes NBIRTH, DBIRTH, NDATA, DDATA and DDEATH at QoS 0 (Sparkplug 3.0
 * section 4.2, tck-id-topics-*-mqtt), and this service subscribes at QoS 0, so delivery is at most
 * once: a message lost on the network or while this service is disconnected or restarting is gone
 * for good and is not redelivered. Losses show as seq gaps (counted, logged, and an event); after
 * a restart, DATA is quarantined until each node's next NBIRTH. Messages are taken one at a time in
 * arrival order, since seq and the alias maps depend on order.
 */
export function buildSparkplugIngest(deps: SparkplugIngestDeps): SparkplugIngest {
  const { store, log, clock, options } = deps;
  const problems = sparkplugOptionProblems(options);
  if (options.url === '') problems.push('the broker URL is empty.');
  if (options.clientId === '') problems.push('the client id is empty.');
  if (problems.length > 0) {
    throw new TrueshiftError('CONFIG_INVALID', `Sparkplug ingest: ${problems.join(' ')}`);
  }
  const highWater = options.highWater ?? 50_000;
  const rangeRefreshMs = options.rangeRefreshMs ?? 60_000;

  // The same valid ranges, and the same refresh rule, as the MQTT and CSV ingest.
  const ranges = createValidRanges(store, clock, rangeRefreshMs);
  const session = createSparkplugSession({
    groups: options.groups,
    tagTemplate: options.tagTemplate,
    maxFutureMs: options.maxFutureMs,
    maxPayloadBytes: options.maxPayloadBytes,
    validRange: (tag) => ranges.lookup(tag),
  });

  const events = new EventEmitter<SparkplugIngestEventMap>();
  const counters = {
    received: 0,
    samples: 0,
    backfill: 0,
    inserted: 0,
    duplicates: 0,
    conflicts: 0,
    quarantined: 0,
    seqGaps: 0,
    births: 0,
    deathsMatched: 0,
    deathsIgnored: 0,
    staleTags: 0,
    stateMessages: 0,
    ignored: 0,
    storeFailures: 0,
  };
  const skipped: SparkplugSkipped = { notNumeric: 0, control: 0, transient: 0 };
  let lastError: string | null = null;
  let client: MqttClient | null = null;
  let subscribed = false;
  let closing = false;
  let readyWaiters: (() => void)[] = [];
  let batch = emptyBatch();
  /** Whether the flush loop runs; cleared in the same step that finds the batch empty. */
  let flushRunning = false;
  let flushing: Promise<void> = Promise.resolve();

  const topics = [
    ...options.groups.map((group) => `${SPARKPLUG_NAMESPACE}/${group}/#`),
    `${SPARKPLUG_NAMESPACE}/STATE/#`,
  ];

  function note(event: SparkplugEvent): void {
    switch (event.type) {
      case 'seq-gap':
        counters.seqGaps++;
        log.warn(
          { node: event.node, expected: event.expected, got: event.got },
          'Sparkplug seq gap: messages of this edge node were lost or reordered',
        );
        break;
      case 'birth':
        counters.births++;
        log.info({ node: event.node, device: event.device, bdSeq: event.bdSeq }, 'Sparkplug birth');
        break;
      case 'death':
        if (event.matched) counters.deathsMatched++;
        else counters.deathsIgnored++;
        log.info(
          { node: event.node, device: event.device, bdSeq: event.bdSeq, reason: event.reason },
          event.matched ? 'Sparkplug death' : 'Sparkplug death ignored',
        );
        break;
      case 'stale-tags':
        counters.staleTags += event.tags.length;
        break;
      case 'state':
        counters.stateMessages++;
        break;
      case 'ignored':
        counters.ignored++;
        log.debug({ reason: event.reason }, 'Sparkplug message left alone');
        break;
    }
  }

  function take(packet: IPublishPacket): void {
    counters.received++;
    const receivedAt = clock();
    const payload =
      typeof packet.payload === 'string' ? Buffer.from(packet.payload) : packet.payload;
    const result = session.handle(packet.topic, payload, { receivedAt, now: receivedAt });
    batch.samples.push(...result.samples);
    batch.backfill.push(...result.backfill);
    batch.rejected.push(...result.rejected);
    batch.events.push(...result.events);
    skipped.notNumeric += result.skipped.notNumeric;
    skipped.control += result.skipped.control;
    skipped.transient += result.skipped.transient;
    for (const event of result.events) note(event);
    if (!flushRunning) {
      flushRunning = true;
      flushing = flush();
    }
  }

  function emit(event: SparkplugEvent): void {
    try {
      switch (event.type) {
        case 'stale-tags':
          events.emit('stale-tags', event);
          break;
        case 'seq-gap':
          events.emit('seq-gap', event);
          break;
        case 'birth':
          events.emit('birth', event);
          break;
        case 'death':
          events.emit('death', event);
          break;
        case 'state':
          events.emit('state', event);
          break;
        case 'ignored':
          break;
      }
    } catch (error) {
      // A listener's fault must not stop the ingest.
      log.error({ error: describe(error), event: event.type }, 'Sparkplug event listener failed');
    }
  }

  /**
   * Commits batches until none is left. A failing store is retried with growing pauses rather than
   * the batch dropped: QoS 0 cannot redeliver, so what is in memory is the only copy. Meanwhile
   * handleMessage holds mqtt.js back, so memory stays bounded by highWater.
   */
  async function flush(): Promise<void> {
    try {
      while (batchSize(batch) > 0) {
        const current = batch;
        batch = emptyBatch();
        await commit(current);
        for (const event of current.events) emit(event);
      }
    } finally {
      flushRunning = false;
    }
  }

  async function commit(current: Batch): Promise<void> {
    const samples = current.samples.concat(current.backfill);
    for (let attempt = 0; ; attempt++) {
      try {
        if (samples.length > 0) {
          const written = await store.writeSamples(samples);
          counters.inserted += written.inserted;
          counters.duplicates += written.duplicates;
          counters.conflicts += written.conflicts;
          // Written, so a retry for the quarantine below must not count them twice.
          counters.samples += current.samples.length;
          counters.backfill += current.backfill.length;
          samples.length = 0;
          current.samples = [];
          current.backfill = [];
        }
        if (current.rejected.length > 0) {
          await store.quarantine(current.rejected);
          counters.quarantined += current.rejected.length;
          current.rejected = [];
        }
        // For the messages after this batch; these were judged against the copy in hand.
        await ranges.refresh().catch((error: unknown) => {
          log.warn({ error: describe(error) }, 'Sparkplug ingest: reloading valid ranges failed');
        });
        return;
      } catch (error) {
        counters.storeFailures++;
        lastError = describe(error);
        if (closing && attempt >= 2) {
          log.error(
            { error: lastError, samples: samples.length, rejected: current.rejected.length },
            'Sparkplug ingest: the store keeps failing while closing; these are lost',
          );
          return;
        }
        const pauseMs = Math.min(30_000, 100 * 2 ** Math.min(attempt, 9));
        log.error({ error: lastError, pauseMs }, 'Sparkplug ingest: store write failed; retrying');
        await sleep(pauseMs);
      }
    }
  }

  const pending = (): number => batchSize(batch);

  const notifyReady = (): void => {
    if (client?.connected !== true || !subscribed) return;
    const waiters = readyWaiters;
    readyWaiters = [];
    for (const resolve of waiters) resolve();
  };

  function subscribe(mqtt: MqttClient): void {
    subscribed = false;
    // QoS 0 as Sparkplug publishes its data (section 4.2): a higher subscription QoS would buy
    // nothing for QoS 0 messages.
    mqtt.subscribe(
      Object.fromEntries(topics.map((topic) => [topic, { qos: 0 as const }])),
      (error, granted) => {
        if (error !== null) {
          lastError = `subscribe failed: ${error.message}`;
          log.error({ error: error.message }, 'Sparkplug ingest: subscribe failed');
          return;
        }
        const refused = (granted ?? []).filter((g) => g.qos === 128);
        if (refused.length > 0) {
          lastError = `the broker refused ${refused.map((g) => g.topic).join(', ')}`;
          log.error(
            { refused: refused.map((g) => g.topic) },
            'Sparkplug ingest: subscription refused',
          );
          return;
        }
        subscribed = true;
        log.info({ topics }, 'Sparkplug ingest subscribed');
        notifyReady();
      },
    );
  }

  return {
    events,

    async start() {
      if (client !== null) return;
      // Before the first message: its samples are judged against these ranges.
      await ranges.refresh().catch((error: unknown) => {
        log.warn({ error: describe(error) }, 'Sparkplug ingest: loading valid ranges failed');
      });
      const clientOptions: IClientOptions = {
        clientId: options.clientId,
        protocolVersion: options.protocolVersion ?? 5,
        // Nothing is queued for a QoS 0 subscriber while it is away, so a kept session gains nothing.
        clean: true,
        resubscribe: false,
        reconnectPeriod: options.reconnectMs ?? 1_000,
        connectTimeout: options.connectTimeoutMs ?? 10_000,
        keepalive: options.keepaliveSec ?? 30,
        username: options.username,
        password: options.password,
      };
      const mqtt = connect(options.url, clientOptions);
      client = mqtt;
      // mqtt.js waits for this callback before it reads the next packet, so holding it while the
      // store is behind pushes back on the broker instead of filling memory.
      mqtt.handleMessage = (packet, done) => {
        try {
          take(packet);
        } catch (error) {
          // The session never throws for message content; this is a fault of ours. Keep reading.
          lastError = describe(error);
          log.error({ error: lastError, topic: packet.topic }, 'Sparkplug ingest: message failed');
        }
        if (pending() >= highWater && flushRunning) {
          void flushing.then(() => {
            done();
          });
        } else {
          done();
        }
      };
      mqtt.on('connect', () => {
        log.info({ url: options.url }, 'Sparkplug ingest connected');
        subscribe(mqtt);
      });
      mqtt.on('close', () => {
        subscribed = false;
      });
      mqtt.on('error', (error) => {
        lastError = error.message;
        log.warn({ error: error.message }, 'Sparkplug ingest: MQTT error');
      });
    },

    ready(timeoutMs = 10_000) {
      if (client?.connected === true && subscribed) return Promise.resolve();
      return new Promise<void>((resolve, reject) => {
        const timer = setTimeout(() => {
          readyWaiters = readyWaiters.filter((waiter) => waiter !== done);
          reject(
            new Error(
              `Sparkplug ingest not ready after ${timeoutMs} ms${lastError === null ? '' : `: ${lastError}`}`,
            ),
          );
        }, timeoutMs);
        const done = (): void => {
          clearTimeout(timer);
          resolve();
        };
        readyWaiters.push(done);
      });
    },

    async idle() {
      while (flushRunning) await flushing;
    },

    async close() {
      closing = true;
      const mqtt = client;
      if (mqtt !== null) await mqtt.endAsync();
      while (flushRunning) await flushing;
      client = null;
    },

    stats() {
      return {
        connected: client?.connected === true,
        ...counters,
        skipped: { ...skipped },
        lastError,
        pending: pending(),
        nodes: session.nodes(),
      };
    },
  };
}
