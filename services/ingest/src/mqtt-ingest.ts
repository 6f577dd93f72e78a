import { TrueshiftError } from '@trueshift/errors';
import {
  matchTopic,
  parseMqttMessage,
  subscriptionProblems,
  type SubscriptionSpec,
} from '@trueshift/formats';
import type { QuarantineInput, SampleInput, Store } from '@trueshift/store';
import {
  connect,
  type IClientOptions,
  type IClientSubscribeOptions,
  type IConnackPacket,
  type IPublishPacket,
  type IStream,
  type MqttClient,
} from 'mqtt';
import type { Logger } from 'pino';
import { createValidRanges } from './valid-ranges.js';

export interface MqttTlsOptions {
  ca?: string | Buffer;
  cert?: string | Buffer;
  key?: string | Buffer;
  rejectUnauthorized?: boolean;
}

export interface MqttIngestOptions {
  /** mqtt://host:port or mqtts://host:port. */
  url: string;
  /** Fixed, so the broker keeps this ingest's session (and its unacknowledged messages) across restarts. */
  clientId: string;
  username?: string;
  password?: string;
  tls?: MqttTlsOptions;
  /** 5 by default; 4 (MQTT 3.1.1) for brokers without MQTT 5, such as the embedded one. */
  protocolVersion?: 4 | 5;
  /** MQTT 5 session expiry: how long the broker keeps the session and its messages while we are away. */
  sessionExpirySec: number;
  subscriptions: readonly SubscriptionSpec[];
  /**
   * Subscribe as $share/<group>/<filter> (MQTT 5): the broker hands each message to one of the
   * group's instances. Order across instances is lost; samples carry their own times.
   */
  sharedGroup?: string;
  maxFutureMs: number;
  maxPayloadBytes: number;
  reconnectMinMs: number;
  reconnectMaxMs: number;
  /** The most messages committed in one store transaction; 1000 by default. */
  maxBatch?: number;
  /**
   * How long the first message of a batch waits for company before the commit; 10 ms by default.
   * A transaction costs about as much as a few hundred sample inserts, so under load bigger batches
   * save most of the work, and 10 ms is nothing next to how often a process tag is sampled.
   */
  batchWindowMs?: number;
  /** Messages received but not yet acknowledged, at most (MQTT 5 Receive Maximum); 2000 by default. */
  maxInFlight?: number;
  keepaliveSec?: number;
  connectTimeoutMs?: number;
  /** How old the in-memory copy of the tags' valid ranges may get; 60 s by default. */
  rangeRefreshMs?: number;
}

export interface MqttIngestCounters {
  /** Messages taken from the broker (a redelivery counts again). */
  received: number;
  /** Samples newly stored. */
  stored: number;
  /** Samples already stored with the same value: replays, nothing done. */
  duplicates: number;
  /** Samples whose (tag, time) holds another value: the store kept the old one and quarantined the new. */
  conflicts: number;
  /** Rejections written to the quarantine (a message can give several). */
  quarantined: number;
  skippedRetained: number;
  storeFailures: number;
  /**
   * QoS 0 messages given up after failed store writes. The broker never sends those again, so the
   * ingest keeps them to retry, but only up to maxInFlight of them; the rest are counted here.
   */
  lostQos0: number;
}

export interface MqttIngestHealth {
  connected: boolean;
  /** Connected, subscribed, and the last store write did not fail. */
  healthy: boolean;
  lastError: string | null;
  lastErrorAt: number | null;
  lastCommitAt: number | null;
  /** Messages received and not yet acknowledged. */
  pending: number;
  reconnects: number;
  counters: MqttIngestCounters;
}

export interface MqttIngest {
  /** Starts connecting; resolves once the first attempt is under way, not when it succeeds. */
  start(): Promise<void>;
  /** Resolves when connected and subscribed; rejects after timeoutMs. */
  ready(timeoutMs?: number): Promise<void>;
  /** Commits and acknowledges what was already received, then disconnects; the session stays. */
  close(): Promise<void>;
  health(): MqttIngestHealth;
}

export interface MqttIngestDeps {
  store: Store;
  log: Logger;
  clock: () => number;
  options: MqttIngestOptions;
}

/** One network connection: acknowledgements are only ever written on the one a message came on. */
interface Connection {
  stream: IStream;
  /** A store write failed for a message of this connection: nothing more is acknowledged on it. */
  poisoned: boolean;
}

interface Entry {
  packet: IPublishPacket;
  topic: string;
  payload: Buffer;
  receivedAt: number;
  connection: Connection;
}

/** What identifies a recent message when the broker delivers it again, and when it first came. */
interface Delivery {
  topic: string;
  payload: Buffer;
  receivedAt: number;
}

/**
 * Handed to mqtt.js's handleMessage callback to let the next message in without a PUBACK. In mqtt.js
 * v5 (lib/handlers/publish.js) a QoS 1 PUBACK is written only when that callback is called without
 * an error; called with one, mqtt.js writes nothing and goes on to the next packet. Holding the
 * callback back until the commit would also delay the PUBACK, but mqtt.js hands over messages one
 * at a time, each after the previous callback, so every message would need a commit of its own
 * (measured at about a fifth of the throughput). The ingest writes the PUBACKs itself after commit.
 */
const AFTER_COMMIT = new Error('acknowledged after the store commit');

const EMPTY_RESULT = { inserted: 0, duplicates: 0, conflicts: 0 } as const;

/**
 * PUBACK packets for the given packet ids, back to back. A success PUBACK without properties is the
 * same four bytes in MQTT 3.1.1 and 5 (MQTT 5 section 3.4.2.1 lets the reason code and properties be
 * left out when the reason is success): type 0x40, remaining length 2, the packet id.
 */
function pubacks(ids: readonly number[]): Buffer {
  const out = Buffer.allocUnsafe(ids.length * 4);
  let at = 0;
  for (const id of ids) {
    out[at] = 0x40;
    out[at + 1] = 0x02;
    out.writeUInt16BE(id, at + 2);
    at += 4;
  }
  return out;
}

function describe(error: unknown): string {
  return error instanceof Error ? error.message : String(error);
}

/**
 * Whether a payload carries its own sample time. A retained message is delivered again on every
 * new subscription; without a time of its own, each delivery would take that moment's receive time
 * and store the same old reading as a new sample, so such messages are skipped. Only this
 * presence check is done here; the sample itself is judged by parseMqttMessage.
 */
function carriesOwnTime(spec: SubscriptionSpec, payload: Buffer, maxBytes: number): boolean {
  if (spec.format === 'number') return false;
  // Unreadable or oversized payloads go on to the parser, which quarantines them with a reason.
  if (payload.length > maxBytes) return true;
  let parsed: unknown;
  try {
    parsed = JSON.parse(payload.toString('utf8'));
  } catch {
    return true;
  }
  if (typeof parsed !== 'object' || parsed === null || Array.isArray(parsed)) return true;
  let current: unknown = parsed;
  for (const key of (spec.timeField ?? 'time').split('.')) {
    if (typeof current !== 'object' || current === null || !Object.hasOwn(current, key)) {
      return false;
    }
    current = (current as Record<string, unknown>)[key];
  }
  return current !== undefined && current !== null && current !== '';
}

function checkOptions(options: MqttIngestOptions): void {
  const problems: string[] = [];
  if (options.subscriptions.length === 0) problems.push('there are no subscriptions.');
  options.subscriptions.forEach((spec, i) => {
    for (const problem of subscriptionProblems(spec))
      problems.push(`subscription ${i + 1}: ${problem}`);
  });
  if (options.clientId === '') {
    problems.push('the client id is empty; a fixed id is what keeps the session.');
  }
  if ((options.protocolVersion ?? 5) === 5 && !(options.sessionExpirySec > 0)) {
    // With no session expiry the broker drops unacknowledged messages when the connection ends,
    // and a failed store write would lose them instead of having them redelivered.
    problems.push('the session expiry must be more than 0 s, or messages are lost on reconnect.');
  }
  if (options.sharedGroup !== undefined && (options.protocolVersion ?? 5) !== 5) {
    problems.push('shared subscriptions need MQTT 5.');
  }
  if (options.sharedGroup !== undefined && /[/+#]/.test(options.sharedGroup)) {
    problems.push('the shared group name must not hold /, + or #.');
  }
  const maxInFlight = options.maxInFlight ?? 2000;
  if (!Number.isInteger(maxInFlight) || maxInFlight < 1 || maxInFlight > 65_535) {
    problems.push('maxInFlight must be an integer from 1 to 65535 (MQTT Receive Maximum).');
  }
  if (!(options.reconnectMinMs > 0) || !(options.reconnectMaxMs >= options.reconnectMinMs)) {
    problems.push('the reconnect back-off needs 0 < min <= max milliseconds.');
  }
  if (problems.length > 0) {
    throw new TrueshiftError('CONFIG_INVALID', `MQTT ingest: ${problems.join(' ')}`);
  }
}

/**
 * Takes samples from MQTT into the store. A QoS 1 message is acknowledged (PUBACK) only after its
 * samples and rejections are committed; messages arriving close together share one transaction.
 * When the store fails nothing is acknowledged and the connection is dropped, so the broker, which
 * keeps the persistent session, delivers the messages again.
 */
export function buildMqttIngest(deps: MqttIngestDeps): MqttIngest {
  const { store, log, clock, options } = deps;
  checkOptions(options);
  const [firstSpec] = options.subscriptions;
  if (firstSpec === undefined)
    throw new TrueshiftError('CONFIG_INVALID', 'MQTT ingest: no subscriptions.');
  const protocolVersion = options.protocolVersion ?? 5;
  const maxBatch = options.maxBatch ?? 1000;
  const batchWindowMs = options.batchWindowMs ?? 10;
  const maxInFlight = options.maxInFlight ?? 2000;
  const ranges = createValidRanges(store, clock, options.rangeRefreshMs ?? 60_000);

  const counters: MqttIngestCounters = {
    received: 0,
    stored: 0,
    duplicates: 0,
    conflicts: 0,
    quarantined: 0,
    skippedRetained: 0,
    storeFailures: 0,
    lostQos0: 0,
  };
  let client: MqttClient | null = null;
  let closing = false;
  let closed: Promise<void> | null = null;
  let subscribed = false;
  let subscribing = false;
  let storeFailing = false;
  let lastError: string | null = null;
  let lastErrorAt: number | null = null;
  let lastCommitAt: number | null = null;
  let reconnects = 0;
  let backoffAttempts = 0;
  let reconnectTimer: NodeJS.Timeout | undefined;
  let readyWaiters: (() => void)[] = [];

  const connections = new WeakMap<IStream, Connection>();
  const batch: Entry[] = [];
  /** QoS 0 messages whose write failed: kept for the next commit, as nobody sends them again. */
  let carried: Entry[] = [];
  let pending = 0;
  let batchTimer: NodeJS.Timeout | undefined;
  let retryTimer: NodeJS.Timeout | undefined;
  let committing = false;
  let commitDone: Promise<void> = Promise.resolve();
  /** mqtt.js hands over one message at a time; this is the one held back while too many are pending. */
  let held: ((error?: Error) => void) | null = null;
  /** Recent QoS 1 deliveries by packet id, newest last. */
  const recent = new Map<number, Delivery>();
  const specByTopic = new Map<string, SubscriptionSpec>();

  const noteError = (message: string): void => {
    lastError = message;
    lastErrorAt = clock();
  };

  const specFor = (topic: string): SubscriptionSpec => {
    let spec = specByTopic.get(topic);
    if (spec !== undefined) return spec;
    // A topic no subscription matches (one left in a resumed session after the configuration
    // changed) still goes through the parser with the first spec, which quarantines it with a reason.
    spec = options.subscriptions.find((s) => matchTopic(s.filter, topic) !== null) ?? firstSpec;
    if (specByTopic.size > 100_000) specByTopic.clear();
    specByTopic.set(topic, spec);
    return spec;
  };

  let lastConnection: Connection | null = null;
  const connectionOf = (stream: IStream): Connection => {
    if (lastConnection?.stream === stream) return lastConnection;
    let connection = connections.get(stream);
    if (connection === undefined) {
      connection = { stream, poisoned: false };
      connections.set(stream, connection);
    }
    lastConnection = connection;
    return connection;
  };

  const notifyReady = (): void => {
    if (client?.connected !== true || !subscribed) return;
    const waiters = readyWaiters;
    readyWaiters = [];
    for (const resolve of waiters) resolve();
  };

  /**
   * The receive time for a message. A redelivery (DUP set) of a message seen before keeps the first
   * receive time, so a sample without a time of its own gets the same (tag, time) and the store sees
   * a replay, not a second sample: whether the first delivery was committed and its PUBACK lost, or
   * is still in a batch. The packet id and content identify it; without DUP the same id, topic and
   * payload is a new message (the id was freed by our PUBACK), so it gets a new time.
   */
  const receiveTimeOf = (packet: IPublishPacket, topic: string, payload: Buffer): number => {
    const id = packet.messageId;
    if (packet.qos === 0 || id === undefined) return clock();
    const earlier = recent.get(id);
    if (packet.dup && earlier?.topic === topic && earlier.payload.equals(payload)) {
      return earlier.receivedAt;
    }
    const receivedAt = clock();
    recent.delete(id);
    recent.set(id, { topic, payload, receivedAt });
    // More than the broker can have unacknowledged is never needed: drop the oldest.
    while (recent.size > maxInFlight * 2) {
      const oldest = recent.keys().next();
      if (oldest.done === true) break;
      recent.delete(oldest.value);
    }
    return receivedAt;
  };

  const acknowledge = (entries: readonly Entry[]): void => {
    // Consecutive entries of one connection form a group; almost always there is one group.
    const groups: { connection: Connection; entries: Entry[] }[] = [];
    for (const entry of entries) {
      const last = groups[groups.length - 1];
      if (last?.connection === entry.connection) last.entries.push(entry);
      else groups.push({ connection: entry.connection, entries: [entry] });
    }
    for (const { connection, entries: group } of groups) {
      const ids: number[] = [];
      for (const { packet } of group) {
        if (packet.qos > 0 && packet.messageId !== undefined) ids.push(packet.messageId);
      }
      if (ids.length === 0) continue;
      const { stream } = connection;
      if (!connection.poisoned && !stream.destroyed && stream.writable) {
        // PUBACKs in the order the PUBLISHes came, as MQTT requires for QoS 1, in one write.
        stream.write(pubacks(ids));
      }
      // Otherwise the connection the messages came on is gone, and the broker delivers them again.
    }
  };

  /** The next wait of the back-off shared by reconnects and retries of a failing store. */
  const nextBackoffMs = (): number => {
    const delay = Math.min(
      options.reconnectMaxMs,
      options.reconnectMinMs * 2 ** Math.min(backoffAttempts, 30),
    );
    backoffAttempts++;
    return delay;
  };

  const storeFailed = (error: unknown, entries: readonly Entry[]): void => {
    counters.storeFailures++;
    storeFailing = true;
    noteError(`store write failed: ${describe(error)}`);
    log.error(
      { err: error, messages: entries.length },
      'MQTT ingest: the store write failed; the messages stay unacknowledged and the broker will deliver them again',
    );
    const qos0 = entries.filter((entry) => entry.packet.qos === 0);
    carried = qos0.concat(carried);
    if (carried.length > maxInFlight) {
      const lost = carried.length - maxInFlight;
      carried = carried.slice(0, maxInFlight);
      counters.lostQos0 += lost;
      log.error(
        { lost },
        'MQTT ingest: QoS 0 messages given up while the store fails; the broker cannot send them again',
      );
    }
    const poisoned = new Set<Connection>();
    for (const entry of entries) poisoned.add(entry.connection);
    if (client !== null) poisoned.add(connectionOf(client.stream));
    for (const connection of poisoned) {
      connection.poisoned = true;
      // Ending the connection is what makes the broker redeliver: it resends unacknowledged
      // messages of a persistent session when the client comes back.
      if (!connection.stream.destroyed) connection.stream.destroy();
    }
  };

  /** One transaction for a batch; false when the store failed. */
  const commit = async (entries: readonly Entry[]): Promise<boolean> => {
    const samples: SampleInput[] = [];
    const rejected: QuarantineInput[] = [];
    const taken: Entry[] = [];
    try {
      await ranges.refresh();
    } catch (error) {
      log.warn(
        { err: error },
        'MQTT ingest: cannot reload the tags; keeping the valid ranges known',
      );
    }
    const now = clock();
    for (const entry of entries) {
      // A failed write on this connection ended it; these messages come again on the next one.
      // QoS 0 ones do not, so they are stored all the same.
      if (entry.connection.poisoned && entry.packet.qos > 0) continue;
      taken.push(entry);
      const spec = specFor(entry.topic);
      if (entry.packet.retain && !carriesOwnTime(spec, entry.payload, options.maxPayloadBytes)) {
        counters.skippedRetained++;
        log.debug(
          { topic: entry.topic },
          'MQTT ingest: skipped a retained message without a time of its own',
        );
        continue;
      }
      try {
        const parsed = parseMqttMessage(spec, entry.topic, entry.payload, {
          receivedAt: entry.receivedAt,
          now,
          maxFutureMs: options.maxFutureMs,
          maxPayloadBytes: options.maxPayloadBytes,
          validRange: ranges.lookup,
        });
        for (const sample of parsed.samples) samples.push(sample);
        for (const rejection of parsed.rejected) rejected.push(rejection);
      } catch (error) {
        // The parser is meant never to throw; if it does, the message is kept in the quarantine
        // rather than redelivered for ever or lost.
        log.error(
          { err: error, topic: entry.topic },
          'MQTT ingest: the parser failed on a message',
        );
        rejected.push({
          source: `mqtt:${entry.topic}`,
          raw: entry.payload.toString('utf8'),
          reason: `The message could not be read: ${describe(error)}`,
          code: 'INTERNAL',
          tag: null,
          receivedAt: entry.receivedAt,
        });
      }
    }
    try {
      const result = samples.length > 0 ? await store.writeSamples(samples) : EMPTY_RESULT;
      // Samples first: if the quarantine write fails, the redelivery finds the samples stored and
      // writes only the quarantine again.
      if (rejected.length > 0) await store.quarantine(rejected);
      counters.stored += result.inserted;
      counters.duplicates += result.duplicates;
      counters.conflicts += result.conflicts;
      counters.quarantined += rejected.length;
    } catch (error) {
      storeFailed(error, taken);
      return false;
    }
    lastCommitAt = clock();
    backoffAttempts = 0;
    if (storeFailing) {
      storeFailing = false;
      log.info('MQTT ingest: the store takes samples again');
    }
    acknowledge(taken);
    return true;
  };

  const commitLoop = async (): Promise<void> => {
    try {
      // Messages that arrive during a commit form the next batch: under load the batches grow by
      // themselves, and a lone message waits only the batch window.
      while (batch.length > 0 || carried.length > 0) {
        const retried = carried;
        carried = [];
        const fresh = batch.splice(0, maxBatch);
        let stored = false;
        try {
          stored = await commit(retried.length > 0 ? retried.concat(fresh) : fresh);
        } finally {
          pending -= fresh.length;
          releaseHeld();
        }
        if (!stored) {
          // A failing store is given time; messages arriving meanwhile wait in the batch.
          if (!closing) retryTimer ??= setTimeout(retry, nextBackoffMs());
          break;
        }
      }
    } finally {
      committing = false;
    }
  };

  const startCommit = (): void => {
    if (batchTimer !== undefined) {
      clearTimeout(batchTimer);
      batchTimer = undefined;
    }
    if (committing || retryTimer !== undefined) return;
    if (batch.length === 0 && carried.length === 0) return;
    committing = true;
    commitDone = commitLoop().catch((error: unknown) => {
      // commit() handles store errors itself; anything here is a bug, and must not crash the service.
      noteError(`ingest failure: ${describe(error)}`);
      log.error({ err: error }, 'MQTT ingest: unexpected failure while committing');
    });
  };

  const retry = (): void => {
    retryTimer = undefined;
    startCommit();
  };

  const releaseHeld = (): void => {
    if (held !== null && pending < maxInFlight) {
      const callback = held;
      held = null;
      callback(AFTER_COMMIT);
    }
  };

  const handleMessage = (packet: IPublishPacket, callback: (error?: Error) => void): void => {
    if (client === null || closing) {
      // Left unacknowledged: the persistent session keeps it for the next start.
      callback(AFTER_COMMIT);
      return;
    }
    counters.received++;
    const topic = packet.topic;
    const payload =
      typeof packet.payload === 'string' ? Buffer.from(packet.payload) : packet.payload;
    batch.push({
      packet,
      topic,
      payload,
      receivedAt: receiveTimeOf(packet, topic, payload),
      connection: connectionOf(client.stream),
    });
    pending++;
    if (pending < maxInFlight) callback(AFTER_COMMIT);
    // Too many unacknowledged: hold this callback, and mqtt.js reads nothing more until a commit.
    else held = callback;
    if (committing || retryTimer !== undefined) return;
    if (batch.length >= maxBatch) startCommit();
    else batchTimer ??= setTimeout(startCommit, batchWindowMs);
  };

  const subscribe = (current: MqttClient): void => {
    if (subscribing) return;
    subscribing = true;
    const map: Record<string, IClientSubscribeOptions> = {};
    for (const spec of options.subscriptions) {
      // MQTT 5 retain handling 1: retained messages only for a subscription that is new to the
      // broker, so subscribing again over a resumed session replays nothing.
      const filter =
        options.sharedGroup === undefined
          ? spec.filter
          : `$share/${options.sharedGroup}/${spec.filter}`;
      map[filter] = protocolVersion === 5 ? { qos: 1, rh: 1 } : { qos: 1 };
    }
    current.subscribe(map, (error, granted) => {
      subscribing = false;
      const refused = (granted ?? []).filter((grant) => grant.qos === 128);
      if (error !== null || refused.length > 0) {
        const why =
          error !== null
            ? describe(error)
            : `refused: ${refused.map((grant) => grant.topic).join(', ')}`;
        noteError(`subscribe failed: ${why}`);
        log.error(
          { err: error, refused },
          'MQTT ingest: the broker did not take the subscriptions',
        );
        return;
      }
      subscribed = true;
      log.info({ filters: Object.keys(map) }, 'MQTT ingest: subscribed');
      notifyReady();
    });
  };

  const onConnack = (current: MqttClient, connack: IConnackPacket): void => {
    const sessionPresent = connack.sessionPresent;
    log.info({ sessionPresent }, 'MQTT ingest: connected');
    if (!storeFailing) backoffAttempts = 0;
    if (!sessionPresent) {
      // A new session: the broker forgot our subscriptions and will redeliver nothing.
      subscribed = false;
      recent.clear();
    }
    if (!subscribed) subscribe(current);
    notifyReady();
  };

  const scheduleReconnect = (): void => {
    if (closing || reconnectTimer !== undefined) return;
    reconnectTimer = setTimeout(() => {
      reconnectTimer = undefined;
      if (closing || client === null) return;
      reconnects++;
      client.reconnect();
    }, nextBackoffMs());
  };

  const start = (): Promise<void> => {
    if (client !== null) return Promise.resolve();
    return ranges
      .refresh(true)
      .catch((error: unknown) => {
        log.warn({ err: error }, 'MQTT ingest: cannot read the tags yet; starting without ranges');
      })
      .then(() => {
        if (closing) return;
        const clientOptions: IClientOptions = {
          clientId: options.clientId,
          protocolVersion,
          clean: false,
          // Reconnecting is done here, with back-off; mqtt.js would retry at a fixed period.
          reconnectPeriod: 0,
          // Subscriptions are renewed here when the broker lost the session.
          resubscribe: false,
          manualConnect: true,
          keepalive: options.keepaliveSec ?? 30,
          connectTimeout: options.connectTimeoutMs ?? 10_000,
          ...(options.username !== undefined && { username: options.username }),
          ...(options.password !== undefined && { password: options.password }),
          ...(options.tls ?? {}),
          ...(protocolVersion === 5 && {
            properties: {
              sessionExpiryInterval: options.sessionExpirySec,
              receiveMaximum: maxInFlight,
            },
          }),
        };
        const current = connect(options.url, clientOptions);
        client = current;
        current.handleMessage = handleMessage;
        current.on('connect', (connack) => {
          onConnack(current, connack);
        });
        current.on('close', () => {
          if (closing) return;
          log.warn('MQTT ingest: connection closed; reconnecting');
          scheduleReconnect();
        });
        current.on('error', (error) => {
          noteError(`MQTT: ${describe(error)}`);
          log.warn({ err: error }, 'MQTT ingest: connection error');
        });
        current.connect();
      });
  };

  const close = (): Promise<void> => {
    closed ??= (async () => {
      closing = true;
      if (reconnectTimer !== undefined) clearTimeout(reconnectTimer);
      if (retryTimer !== undefined) clearTimeout(retryTimer);
      retryTimer = undefined;
      startCommit();
      await commitDone;
      if (carried.length > 0) {
        counters.lostQos0 += carried.length;
        log.error(
          { lost: carried.length },
          'MQTT ingest: closed with QoS 0 messages the store did not take',
        );
      }
      const current = client;
      if (current !== null) await current.endAsync(!current.connected);
      const waiters = readyWaiters;
      readyWaiters = [];
      for (const resolve of waiters) resolve();
    })();
    return closed;
  };

  const ready = (timeoutMs = 10_000): Promise<void> => {
    if (client?.connected === true && subscribed) return Promise.resolve();
    return new Promise<void>((resolve, reject) => {
      const timer = setTimeout(() => {
        readyWaiters = readyWaiters.filter((waiter) => waiter !== done);
        reject(new Error(`MQTT ingest not connected and subscribed after ${timeoutMs} ms`));
      }, timeoutMs);
      const done = (): void => {
        clearTimeout(timer);
        resolve();
      };
      readyWaiters.push(done);
    });
  };

  const health = (): MqttIngestHealth => {
    const connected = client?.connected === true;
    return {
      connected,
      healthy: connected && subscribed && !storeFailing,
      lastError,
      lastErrorAt,
      lastCommitAt,
      pending,
      reconnects,
      counters: { ...counters },
    };
  };

  return { start, ready, close, health };
}
