import type { EventEmitter } from 'node:events';
import { mkdir } from 'node:fs/promises';
import { connectAsync } from 'mqtt';
import type { MqttClient } from 'mqtt';
import type { Logger } from 'pino';
import { buildAnalyser } from '@trueshift/analyser-service';
import type { Analyser, AnalyserOptions } from '@trueshift/analyser-service';
import { buildCluster } from '@trueshift/cluster';
import type { Cluster, ClusterEvents } from '@trueshift/cluster';
import { buildApi, listenApi } from '@trueshift/api';
import type { ResolvedConfig } from '@trueshift/config';
import { buildDelivery, outboxTargets } from '@trueshift/delivery';
import type { Delivery } from '@trueshift/delivery';
import { buildDropFolder, buildMqttIngest, startEmbeddedBroker } from '@trueshift/ingest';
import { buildSparkplugIngest } from '@trueshift/sparkplug-ingest';
import type { DropFolder, EmbeddedBroker, MqttIngest } from '@trueshift/ingest';
import type { Store } from '@trueshift/store';
import { registerWeb } from '@trueshift/web';
import type { FastifyInstance } from 'fastify';
import { instanceName, openConfiguredStore } from './open-store.js';

export interface AppDeps {
  config: ResolvedConfig;
  log: Logger;
  clock?: () => number;
  /** Extra routes (e.g. the page) mounted on the API before it listens. */
  extend?: (
    app: FastifyInstance,
    parts: { store: Store; clock: () => number },
  ) => Promise<void> | void;
}

export interface RunningApp {
  /** Where the API and page answer, e.g. http://127.0.0.1:8640. */
  apiUrl: string;
  /** The broker the ingest reads: the configured one, or the embedded one. */
  brokerUrl: string;
  embeddedBroker: boolean;
  store: Store;
  /** The one analyser of a SQLite store; null when instances share shards of a PostgreSQL one. */
  analyser: Analyser | null;
  /** Leases and messages between instances (PostgreSQL store); null with SQLite. */
  cluster: Cluster | null;
  /** Every alert and evidence change (and, in a cluster, other instances' mark changes). */
  events: EventEmitter<ClusterEvents>;
  api: FastifyInstance;
  /** Stops taking input, finishes the current batches, saves state and closes everything. */
  close(): Promise<void>;
}

const realTimers = {
  setInterval: (callback: () => void, ms: number): unknown => setInterval(callback, ms),
  clearInterval: (handle: unknown): void => {
    clearInterval(handle as NodeJS.Timeout);
  },
  setTimeout: (callback: () => void, ms: number): unknown => setTimeout(callback, ms),
  clearTimeout: (handle: unknown): void => {
    clearTimeout(handle as NodeJS.Timeout);
  },
};

/**
 * Everything trueshift does, in one process, on the given configuration: the store, the embedded
 * broker when no broker is configured, MQTT ingest, the drop folder, the analyser, alert delivery
 * and the API. Parts are started in the order data flows and closed in the reverse order, so a
 * sample acknowledged to the broker is always in the store first.
 */
export async function startApp(deps: AppDeps): Promise<RunningApp> {
  const { config, log } = deps;
  const clock = deps.clock ?? Date.now;
  const closers: { name: string; close: () => Promise<void> }[] = [];
  const closeAll = async (): Promise<void> => {
    for (const part of closers.reverse()) {
      try {
        await part.close();
      } catch (error) {
        log.error({ err: error, part: part.name }, 'closing a part failed');
      }
    }
    closers.length = 0;
  };

  try {
    await mkdir(config.drop.folder, { recursive: true });
    const instance = instanceName(config);
    const { store, shared: clusterStore } = await openConfiguredStore(config, instance);
    const shared = clusterStore !== null;
    closers.push({ name: 'store', close: () => store.close() });
    // Instances sharing a database each keep their own broker session, so each needs its own id;
    // the same instance name after a restart resumes the same session.
    const clientId = (base: string): string => (shared ? `${base}-${instance}` : base);

    let broker: EmbeddedBroker | null = null;
    if (config.mqtt.url === null) {
      const embedded = await startEmbeddedBroker(config.mqtt.embedded);
      broker = embedded;
      closers.push({ name: 'embedded broker', close: () => embedded.close() });
      log.info({ url: embedded.url }, 'embedded MQTT broker started');
    }
    const brokerUrl = broker?.url ?? config.mqtt.url ?? '';
    // The embedded broker speaks MQTT 3.1.1 only; a persistent session there is clean: false.
    const protocolVersion = broker === null ? 5 : 4;

    const analyserOptions: AnalyserOptions = {
      pollMs: config.analysis.pollMs,
      alertTargets: outboxTargets(config, clock()),
      defaults: {
        riskLevel: config.analysis.riskLevel,
        nBefore: config.analysis.nBefore,
        alertAfter: config.analysis.alertAfter,
        inControlArl: config.analysis.inControlArl,
        cusumK: config.analysis.cusumK,
        ewmaLambda: config.analysis.ewmaLambda,
        staleAfterIntervals: config.analysis.staleAfterIntervals,
        stuckAfter: config.analysis.stuckAfter,
      },
    };
    let analyser: Analyser | null = null;
    let cluster: Cluster | null = null;
    let events: EventEmitter<ClusterEvents>;
    if (clusterStore !== null) {
      const built = buildCluster({
        store: clusterStore,
        log: log.child({ part: 'cluster', instance }),
        clock,
        timers: realTimers,
        options: { leaseMs: config.cluster.leaseMs, renewMs: config.cluster.renewMs },
        makeAnalyser: (shard, fence) =>
          buildAnalyser({
            store: clusterStore,
            log: log.child({ part: 'analyser', shard }),
            clock,
            options: { ...analyserOptions, shard, fence },
          }),
      });
      cluster = built;
      events = built.events;
      closers.push({ name: 'cluster', close: () => built.close() });
    } else {
      const single = buildAnalyser({
        store,
        log: log.child({ part: 'analyser' }),
        clock,
        options: analyserOptions,
      });
      analyser = single;
      events = single.events as unknown as EventEmitter<ClusterEvents>;
      closers.push({ name: 'analyser', close: () => single.close() });
    }

    const publisher: MqttClient = await connectAsync(brokerUrl, {
      clientId: `${clientId(config.mqtt.clientId)}-alerts`,
      protocolVersion,
      reconnectPeriod: config.mqtt.reconnectMinMs,
      ...(config.mqtt.username === undefined ? {} : { username: config.mqtt.username }),
      ...(config.mqtt.password === undefined ? {} : { password: config.mqtt.password }),
    });
    closers.push({ name: 'alert publisher', close: () => publisher.endAsync() });
    const delivery: Delivery = buildDelivery({
      store,
      clock,
      log: log.child({ part: 'delivery' }),
      options: config.delivery,
      webhooks: config.webhooks,
      timers: realTimers,
      publishMqtt: async (topic, payload) => {
        await publisher.publishAsync(topic, payload, { qos: 1 });
      },
      ...(cluster === null ? {} : { active: () => cluster.owned().includes(0) }),
    });
    closers.push({ name: 'delivery', close: () => delivery.stop() });

    const ingest: MqttIngest = buildMqttIngest({
      store,
      log: log.child({ part: 'mqtt-ingest' }),
      clock,
      options: {
        url: brokerUrl,
        clientId: clientId(config.mqtt.clientId),
        protocolVersion,
        ...(config.mqtt.sharedGroup === null ? {} : { sharedGroup: config.mqtt.sharedGroup }),
        ...(config.mqtt.username === undefined ? {} : { username: config.mqtt.username }),
        ...(config.mqtt.password === undefined ? {} : { password: config.mqtt.password }),
        sessionExpirySec: config.mqtt.sessionExpirySec,
        subscriptions: config.mqtt.subscriptions,
        maxFutureMs: config.ingest.maxFutureMs,
        maxPayloadBytes: config.ingest.maxPayloadBytes,
        reconnectMinMs: config.mqtt.reconnectMinMs,
        reconnectMaxMs: config.mqtt.reconnectMaxMs,
      },
    });
    const drop: DropFolder = buildDropFolder({
      store,
      log: log.child({ part: 'drop-folder' }),
      clock,
      options: {
        folder: config.drop.folder,
        pollMs: config.drop.pollMs,
        maxFutureMs: config.ingest.maxFutureMs,
      },
    });

    const api = await buildApi({
      store,
      config,
      clock,
      log: log.child({ part: 'api' }),
      events,
      wakeDelivery: () => {
        delivery.wake();
      },
      health: async () => {
        const mqtt = ingest.health();
        return {
          // Connected but failing to store is not ready either: nothing is being acknowledged.
          ingest: { connected: mqtt.connected && mqtt.healthy, detail: mqtt.lastError },
          analyser: { lag: (await (cluster ?? analyser)?.lag()) ?? 0 },
        };
      },
    });
    registerWeb(api, { store, clock, config });
    await deps.extend?.(api, { store, clock });
    closers.push({ name: 'api', close: () => api.close() });

    analyser?.start();
    await cluster?.start();
    delivery.start();
    await ingest.start();
    closers.push({ name: 'mqtt ingest', close: () => ingest.close() });
    await drop.start();
    closers.push({ name: 'drop folder', close: () => drop.close() });
    if (config.sparkplug.groups.length > 0) {
      // Sparkplug B data is QoS 0 by its specification: at most once, with losses seen as seq gaps.
      const sparkplug = buildSparkplugIngest({
        store,
        log: log.child({ part: 'sparkplug' }),
        clock,
        options: {
          url: brokerUrl,
          clientId: clientId(config.sparkplug.clientId),
          groups: config.sparkplug.groups,
          tagTemplate: config.sparkplug.tagTemplate,
          protocolVersion,
          maxFutureMs: config.ingest.maxFutureMs,
          maxPayloadBytes: config.ingest.maxPayloadBytes,
          ...(config.mqtt.username === undefined ? {} : { username: config.mqtt.username }),
          ...(config.mqtt.password === undefined ? {} : { password: config.mqtt.password }),
        },
      });
      sparkplug.events.on('stale-tags', () => {
        analyser?.notify();
        cluster?.notify();
      });
      await sparkplug.start();
      closers.push({ name: 'sparkplug ingest', close: () => sparkplug.close() });
    }
    const apiUrl = await listenApi(api, config);
    log.info({ apiUrl, brokerUrl }, 'trueshift is running');

    let closed: Promise<void> | null = null;
    return {
      apiUrl,
      brokerUrl,
      embeddedBroker: broker !== null,
      store,
      analyser,
      cluster,
      events,
      api,
      close: () => (closed ??= closeAll()),
    };
  } catch (error) {
    await closeAll();
    throw error;
  }
}
