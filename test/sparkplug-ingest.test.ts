/**
 * Sparkplug B ingest against a real mosquitto and a real SQLite file: real Sparkplug B protobuf
 * messages are published the way an edge node publishes them (QoS 0, Sparkplug 3.0 section 4.2)
 * and the test reads what the store holds.
 */
import { mkdtemp, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { connectAsync, type MqttClient } from 'mqtt';
import { afterAll, afterEach, beforeAll, beforeEach, describe, expect, it } from 'vitest';
import {
  encodeSparkplugPayload,
  type MetricInput,
  type PayloadInput,
  SparkplugDataType as DT,
  type SparkplugEvent,
} from '@trueshift/sparkplug';
import {
  buildSparkplugIngest,
  type SparkplugIngest,
  type SparkplugIngestEventMap,
} from '@trueshift/sparkplug-ingest';
import { QUALITY_BAD, QUALITY_GOOD, QUALITY_STALE, type Store } from '@trueshift/store';
import { openSqliteStore } from '@trueshift/store-sqlite';
import { captureLog, type CapturedLog } from './helpers/logs.js';
import { type Mosquitto, startMosquitto } from './helpers/mosquitto.js';
import { failingFirstWrites, waitFor } from './helpers/store-faults.js';

let broker: Mosquitto;
let dir: string;
let store: Store;
let ingest: SparkplugIngest;
let edge: MqttClient;
let logs: CapturedLog;
let group: string;
let testNumber = 0;
let events: SparkplugEvent[];
/** Sample times: a minute before the test, so none lies in the future of the ingest's clock. */
let T: number;

beforeAll(async () => {
  broker = await startMosquitto();
});

afterAll(async () => {
  await broker.dispose();
});

beforeEach(async () => {
  testNumber++;
  group = `Plant${testNumber}`;
  T = Math.floor(Date.now() / 1000) * 1000 - 60_000;
  dir = await mkdtemp(join(tmpdir(), 'trueshift-sparkplug-'));
  store = openSqliteStore({ path: join(dir, 'store.db') });
  logs = captureLog();
  ingest = buildSparkplugIngest({
    store,
    log: logs.log,
    clock: Date.now,
    options: { url: broker.url, clientId: `sparkplug-test-${testNumber}`, groups: [group] },
  });
  events = [];
  const keys: (keyof SparkplugIngestEventMap)[] = [
    'birth',
    'death',
    'seq-gap',
    'stale-tags',
    'state',
  ];
  for (const key of keys) {
    ingest.events.on(key, (event: SparkplugEvent) => events.push(event));
  }
  await ingest.start();
  await ingest.ready();
  edge = await connectAsync(broker.url, { clientId: `edge-${testNumber}` });
});

afterEach(async () => {
  await edge.endAsync(true);
  await ingest.close();
  await store.close();
  await rm(dir, { recursive: true, force: true });
});

let sent = 0;

/** Publishes like an edge node: QoS 0, not retained (tck-id-topics-ndata-mqtt and the like). */
async function publish(
  type: string,
  payload: PayloadInput,
  device?: string,
  toGroup = group,
): Promise<void> {
  const topic = `spBv1.0/${toGroup}/${type}/Edge7${device === undefined ? '' : `/${device}`}`;
  await edge.publishAsync(topic, Buffer.from(encodeSparkplugPayload(payload)), { qos: 0 });
  sent++;
}

/** Waits until the ingest has taken every message published in this test and committed it. */
async function settled(): Promise<void> {
  const wanted = sent;
  const deadline = Date.now() + 10_000;
  while (ingest.stats().received < wanted) {
    if (Date.now() > deadline) {
      throw new Error(`only ${ingest.stats().received} of ${wanted} messages arrived`);
    }
    await new Promise((resolve) => setTimeout(resolve, 10));
  }
  await ingest.idle();
}

beforeEach(() => {
  sent = 0;
});

async function values(tag: string): Promise<[number, number | null, number][]> {
  const columns = await store.readSamples(tag);
  return [...columns.t].map((t, i) => {
    const value = columns.value[i] ?? Number.NaN;
    return [t, Number.isNaN(value) ? null : value, columns.quality[i] ?? -1];
  });
}

// Section 4.2.1.1.2 / 6.4.19: NBIRTH has seq 0, a bdSeq metric, 'Node Control/Rebirth', and every
// metric with name, alias, datatype and value. Section 6.4.20: DBIRTH continues the node's seq.
function nbirth(bdSeq: number): PayloadInput {
  return {
    timestamp: T,
    seq: 0,
    metrics: [
      { name: 'bdSeq', datatype: DT.Int64, longValue: bdSeq, timestamp: T },
      { name: 'Node Control/Rebirth', datatype: DT.Boolean, booleanValue: false, timestamp: T },
      { name: 'Supply Voltage', alias: 1, datatype: DT.Float, floatValue: 24.1, timestamp: T },
      { name: 'Steam/Flow', alias: 2, datatype: DT.Double, doubleValue: 41.5, timestamp: T },
    ],
  };
}

function dbirth(seq: number): PayloadInput {
  return {
    timestamp: T,
    seq,
    metrics: [
      { name: 'Temp', alias: 10, datatype: DT.Double, doubleValue: 80.25, timestamp: T },
      { name: 'Running', alias: 11, datatype: DT.Boolean, booleanValue: true, timestamp: T },
    ],
  };
}

const quality = (q: number): MetricInput['properties'] => ({
  keys: ['Quality'],
  values: [{ type: DT.Int32, intValue: q }],
});

describe('Sparkplug B ingest through mosquitto into SQLite', () => {
  it('stores BIRTH values, DATA sent by alias only, nulls, qualities and back-fill', async () => {
    await publish('NBIRTH', nbirth(1));
    await publish('DBIRTH', dbirth(1), 'Boiler');
    // DATA metrics carry only the alias, no name and no datatype (section 6.4.6,
    // tck-id-payloads-alias-data-cmd-requirement, tck-id-payloads-metric-datatype-not-req).
    await publish('NDATA', {
      timestamp: T + 2_000,
      seq: 2,
      metrics: [
        { alias: 2, doubleValue: 42.75, timestamp: T + 1_000 },
        { alias: 1, isNull: true, timestamp: T + 1_000 },
      ],
    });
    await publish(
      'DDATA',
      {
        timestamp: T + 3_000,
        seq: 3,
        metrics: [
          // Section 6.4.9.1: Quality 500 is STALE, 0 BAD.
          {
            alias: 10,
            doubleValue: 81.5,
            timestamp: T + 2_000,
            properties: quality(QUALITY_STALE),
          },
          { alias: 10, doubleValue: 82, timestamp: T + 2_500, properties: quality(QUALITY_BAD) },
          { alias: 11, booleanValue: false, timestamp: T + 2_000 },
          // Section 6.4.6: is_historical values are not the current value: back-fill.
          { alias: 10, doubleValue: 75, timestamp: T - 7_200_000, isHistorical: true },
          { alias: 10, doubleValue: 76, timestamp: T - 3_600_000, isHistorical: true },
        ],
      },
      'Boiler',
    );
    await settled();

    const node = `${group}/Edge7`;
    expect(await values(`${node}/Steam/Flow`)).toEqual([
      [T, 41.5, QUALITY_GOOD],
      [T + 1_000, 42.75, QUALITY_GOOD],
    ]);
    // Float 24.1 arrives as float32 and is stored as the edge node wrote it; is_null has no value.
    expect(await values(`${node}/Supply Voltage`)).toEqual([
      [T, 24.1, QUALITY_GOOD],
      [T + 1_000, null, QUALITY_BAD],
    ]);
    expect(await values(`${node}/Boiler/Temp`)).toEqual([
      [T - 7_200_000, 75, QUALITY_GOOD],
      [T - 3_600_000, 76, QUALITY_GOOD],
      [T, 80.25, QUALITY_GOOD],
      [T + 2_000, 81.5, QUALITY_STALE],
      [T + 2_500, 82, QUALITY_BAD],
    ]);
    expect(await values(`${node}/Boiler/Running`)).toEqual([
      [T, 1, QUALITY_GOOD],
      [T + 2_000, 0, QUALITY_GOOD],
    ]);
    // bdSeq and Node Control/Rebirth are not process values.
    expect(await store.countSamples(`${node}/bdSeq`)).toBe(0);
    const stats = ingest.stats();
    expect(stats).toMatchObject({
      received: 4,
      samples: 9,
      backfill: 2,
      inserted: 11,
      quarantined: 0,
      seqGaps: 0,
      births: 2,
      skipped: { notNumeric: 0, control: 2, transient: 0 },
    });
    expect(stats.nodes).toEqual([
      {
        node,
        online: true,
        bdSeq: 1,
        lastSeq: 3,
        metrics: 4,
        devices: [{ device: 'Boiler', online: true, metrics: 2 }],
      },
    ]);
    expect(await store.countQuarantine()).toBe(0);
  });

  it('reports a seq gap, ignores an NDEATH of another session and marks tags stale on the right one', async () => {
    await publish('NBIRTH', nbirth(4));
    await publish('DBIRTH', dbirth(1), 'Boiler');
    await publish('NDATA', { seq: 2, metrics: [{ alias: 2, doubleValue: 43, timestamp: T + 1 }] });
    // seq 3 and 4 are lost (section 6.4.5: seq rises by one per message).
    await publish('NDATA', { seq: 5, metrics: [{ alias: 2, doubleValue: 44, timestamp: T + 2 }] });
    // A late will of an older connection: bdSeq 3 is not the current NBIRTH's 4 (section 4.2.1.3).
    await publish('NDEATH', { metrics: [{ name: 'bdSeq', datatype: DT.Int64, longValue: 3 }] });
    await publish('NDATA', { seq: 6, metrics: [{ alias: 2, doubleValue: 45, timestamp: T + 3 }] });
    await settled();
    expect(events.filter((e) => e.type === 'seq-gap')).toEqual([
      expect.objectContaining({ node: `${group}/Edge7`, expected: 3, got: 5 }),
    ]);
    expect(ingest.stats().seqGaps).toBe(1);
    expect(logs.records().filter((r) => r.msg.startsWith('Sparkplug seq gap'))).toHaveLength(1);
    expect(events.filter((e) => e.type === 'death')).toEqual([
      expect.objectContaining({ matched: false, bdSeq: 3 }),
    ]);
    // The ignored NDEATH stopped nothing: the DATA after it is stored.
    expect((await values(`${group}/Edge7/Steam/Flow`)).map(([, v]) => v)).toEqual([
      41.5, 43, 44, 45,
    ]);

    // Section 5.5: an NDEATH with the NBIRTH's bdSeq makes every NBIRTH and DBIRTH metric STALE.
    const before = Date.now();
    await publish('NDEATH', { metrics: [{ name: 'bdSeq', datatype: DT.Int64, longValue: 4 }] });
    await settled();
    const stale = events.filter((e) => e.type === 'stale-tags');
    const tags = ['Supply Voltage', 'Steam/Flow', 'Boiler/Temp', 'Boiler/Running'].map(
      (metric) => `${group}/Edge7/${metric}`,
    );
    expect(stale).toEqual([expect.objectContaining({ node: `${group}/Edge7`, tags })]);
    for (const tag of tags) {
      const last = (await values(tag)).at(-1);
      expect(last?.[1]).toBeNull();
      expect(last?.[2]).toBe(QUALITY_STALE);
      expect(last?.[0]).toBeGreaterThanOrEqual(before);
    }
    expect(ingest.stats()).toMatchObject({ deathsMatched: 1, deathsIgnored: 1, staleTags: 4 });
  });

  it('quarantines DATA before any BIRTH, and DATA after a DDEATH, with the reason', async () => {
    await publish('NDATA', { seq: 9, metrics: [{ alias: 2, doubleValue: 1, timestamp: T }] });
    await publish('NBIRTH', nbirth(0));
    await publish('DBIRTH', dbirth(1), 'Boiler');
    await publish('DDEATH', { seq: 2, timestamp: T + 5 }, 'Boiler');
    await publish(
      'DDATA',
      { seq: 3, metrics: [{ alias: 10, doubleValue: 1, timestamp: T }] },
      'Boiler',
    );
    await publish('NDATA', { seq: 4, metrics: [{ alias: 99, doubleValue: 1, timestamp: T }] });
    await settled();
    const entries = (await store.listQuarantine()).sort((a, b) => a.id - b.id);
    expect(entries.map((e) => [e.code, e.source])).toEqual([
      ['SPARKPLUG_NO_BIRTH', `sparkplug:spBv1.0/${group}/NDATA/Edge7`],
      ['SPARKPLUG_NO_BIRTH', `sparkplug:spBv1.0/${group}/DDATA/Edge7/Boiler`],
      ['SPARKPLUG_UNKNOWN_ALIAS', `sparkplug:spBv1.0/${group}/NDATA/Edge7`],
    ]);
    expect(entries[0]?.reason).toMatch(/since this service started.*next NBIRTH/);
    expect(entries[1]?.reason).toMatch(/sent its DDEATH/);
    expect(JSON.parse(entries[0]?.raw ?? '')).toMatchObject({ seq: '9' });
    // Section 5.7: the DDEATH made the device's metrics stale at the DDEATH's timestamp.
    expect((await values(`${group}/Edge7/Boiler/Temp`)).at(-1)).toEqual([
      T + 5,
      null,
      QUALITY_STALE,
    ]);
    expect(await store.countSamples(`${group}/Edge7/Steam/Flow`)).toBe(1);
  });

  it('keeps what arrived and retries while the store fails, since QoS 0 cannot redeliver', async () => {
    const other = `${group}-b`;
    const faulty = buildSparkplugIngest({
      store: failingFirstWrites(store, 2),
      log: logs.log,
      clock: Date.now,
      options: { url: broker.url, clientId: `sparkplug-faulty-${testNumber}`, groups: [other] },
    });
    const stale: SparkplugEvent[] = [];
    faulty.events.on('stale-tags', (event) => stale.push(event));
    try {
      await faulty.start();
      await faulty.ready();
      await publish('NBIRTH', nbirth(0), undefined, other);
      await publish(
        'NDATA',
        { seq: 1, metrics: [{ alias: 2, doubleValue: 43, timestamp: T + 1 }] },
        undefined,
        other,
      );
      await publish('NDEATH', { metrics: [{ name: 'bdSeq', longValue: 0 }] }, undefined, other);
      await waitFor(() => faulty.stats().received === 3, 'three messages');
      await faulty.idle();
      expect(faulty.stats()).toMatchObject({ storeFailures: 2, inserted: 5 });
      expect(faulty.stats().lastError).toMatch(/injected store failure 2 of 2/);
      const flow = (await values(`${other}/Edge7/Steam/Flow`)).map(([, v, q]) => [v, q]);
      expect(flow).toEqual([
        [41.5, QUALITY_GOOD],
        [43, QUALITY_GOOD],
        [null, QUALITY_STALE],
      ]);
      // The stale-tags event comes only once its markers are in the store.
      expect(stale).toHaveLength(1);
    } finally {
      await faulty.close();
    }
  });

  it('notes the STATE messages of Host Applications', async () => {
    // Section 4.2.3: spBv1.0/STATE/<host id>, QoS 1, retained, JSON {"online", "timestamp"}.
    await edge.publishAsync(
      'spBv1.0/STATE/scada-main',
      JSON.stringify({ online: true, timestamp: T }),
      { qos: 1, retain: true },
    );
    sent++;
    await settled();
    expect(events).toEqual([
      expect.objectContaining({ type: 'state', hostId: 'scada-main', online: true, timestamp: T }),
    ]);
    // Retained: clear it so the broker does not keep it for later tests.
    await edge.publishAsync('spBv1.0/STATE/scada-main', '', { qos: 1, retain: true });
    sent++;
    await settled();
  });
});
