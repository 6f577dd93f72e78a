import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { QUALITY_BAD, QUALITY_GOOD, QUALITY_STALE } from '@trueshift/store';
import { SparkplugDataType as DT } from './sparkplug-b-schema.js';
import { encodeSparkplugPayload, type MetricInput } from './sparkplug-codec.js';
import {
  createSparkplugSession,
  type SparkplugEvent,
  type SparkplugSession,
  type SparkplugSessionOptions,
  sparkplugOptionProblems,
} from './sparkplug-session.js';

const T0 = Date.UTC(2024, 0, 15, 8, 0, 0);
const ctx = { receivedAt: T0 + 60_000, now: T0 + 60_000 };
const GROUP = 'Plant1';
const NODE = 'Edge7';

function session(options: Partial<SparkplugSessionOptions> = {}): SparkplugSession {
  return createSparkplugSession({ groups: [GROUP], ...options });
}

function topic(type: string, device?: string): string {
  return `spBv1.0/${GROUP}/${type}/${NODE}${device === undefined ? '' : `/${device}`}`;
}

function send(
  s: SparkplugSession,
  type: string,
  payload: Parameters<typeof encodeSparkplugPayload>[0],
  device?: string,
  at = ctx,
) {
  return s.handle(topic(type, device), encodeSparkplugPayload(payload), at);
}

// Section 4.2.1.1.2 / 6.4.19: an NBIRTH carries seq 0, a bdSeq metric, 'Node Control/Rebirth'
// (Boolean, false) and every metric with name, alias, datatype and current value.
function nbirth(bdSeq: number, extra: MetricInput[] = []): Parameters<typeof send>[2] {
  return {
    timestamp: T0,
    seq: 0,
    metrics: [
      { name: 'bdSeq', datatype: DT.Int64, longValue: bdSeq, timestamp: T0 },
      { name: 'Node Control/Rebirth', datatype: DT.Boolean, booleanValue: false, timestamp: T0 },
      { name: 'Supply Voltage', alias: 1, datatype: DT.Float, floatValue: 12.1, timestamp: T0 },
      { name: 'Steam/Flow', alias: 2, datatype: DT.Double, doubleValue: 41.5, timestamp: T0 },
      ...extra,
    ],
  };
}

function dbirth(seq: number): Parameters<typeof send>[2] {
  return {
    timestamp: T0,
    seq,
    metrics: [
      { name: 'Temp', alias: 10, datatype: DT.Double, doubleValue: 80.25, timestamp: T0 },
      { name: 'Level', alias: 11, datatype: DT.Int16, intValue: 3, timestamp: T0 },
      { name: 'Mode', alias: 12, datatype: DT.String, stringValue: 'auto', timestamp: T0 },
    ],
  };
}

function born(): SparkplugSession {
  const s = session();
  send(s, 'NBIRTH', nbirth(3));
  send(s, 'DBIRTH', dbirth(1), 'Boiler');
  return s;
}

function ofType<T extends SparkplugEvent['type']>(
  events: readonly SparkplugEvent[],
  type: T,
): Extract<SparkplugEvent, { type: T }>[] {
  return events.filter((e): e is Extract<SparkplugEvent, { type: T }> => e.type === type);
}

describe('BIRTH messages', () => {
  it('learn the metrics and store their current values under group/node/device/metric', () => {
    const s = session();
    const node = send(s, 'NBIRTH', nbirth(3));
    expect(node.rejected).toEqual([]);
    // The edge node's own metrics have no device level in the default template.
    expect(node.samples.map((x) => [x.tag, x.t, x.value, x.quality])).toEqual([
      ['Plant1/Edge7/Supply Voltage', T0, 12.1, QUALITY_GOOD],
      ['Plant1/Edge7/Steam/Flow', T0, 41.5, QUALITY_GOOD],
    ]);
    expect(node.samples[0]?.source).toBe('sparkplug:spBv1.0/Plant1/NBIRTH/Edge7');
    // bdSeq and Node Control/* are session plumbing, not process values.
    expect(node.skipped).toEqual({ notNumeric: 0, control: 2, transient: 0 });
    expect(ofType(node.events, 'birth')).toEqual([
      {
        type: 'birth',
        node: 'Plant1/Edge7',
        device: null,
        bdSeq: 3,
        metrics: 4,
        at: ctx.receivedAt,
      },
    ]);

    const device = send(s, 'DBIRTH', dbirth(1), 'Boiler');
    expect(device.samples.map((x) => [x.tag, x.value])).toEqual([
      ['Plant1/Edge7/Boiler/Temp', 80.25],
      ['Plant1/Edge7/Boiler/Level', 3],
    ]);
    // A String metric is valid Sparkplug, just not a number to analyse: counted, not quarantined.
    expect(device.skipped.notNumeric).toBe(1);
    expect(device.rejected).toEqual([]);
    expect(s.nodes()).toEqual([
      {
        node: 'Plant1/Edge7',
        online: true,
        bdSeq: 3,
        lastSeq: 1,
        metrics: 4,
        devices: [{ device: 'Boiler', online: true, metrics: 3 }],
      },
    ]);
  });

  it('follow the configured tag template', () => {
    const s = session({ tagTemplate: 'sp.{node}.{device}.{metric}' });
    send(s, 'NBIRTH', nbirth(0));
    const device = send(s, 'DBIRTH', dbirth(1), 'Boiler');
    expect(device.samples[0]?.tag).toBe('sp.Edge7.Boiler.Temp');
    const data = send(s, 'NDATA', {
      seq: 2,
      metrics: [{ alias: 2, doubleValue: 1, timestamp: T0 }],
    });
    // No device: {device} goes with one "/" beside it, and there is none here, so only it goes.
    expect(data.samples[0]?.tag).toBe('sp.Edge7..Steam/Flow');
  });

  it('reject BIRTH metrics without a name or datatype, or with a reused alias, and keep the rest', () => {
    const s = session();
    const result = send(
      s,
      'NBIRTH',
      nbirth(0, [
        { alias: 20, datatype: DT.Double, doubleValue: 1, timestamp: T0 },
        { name: 'No type', alias: 21, doubleValue: 1, timestamp: T0 },
        { name: 'Clash', alias: 2, datatype: DT.Double, doubleValue: 99, timestamp: T0 },
      ]),
    );
    expect(result.rejected.map((r) => r.code)).toEqual([
      'SPARKPLUG_INVALID',
      'SPARKPLUG_INVALID',
      'SPARKPLUG_INVALID',
    ]);
    expect(result.rejected[2]?.reason).toMatch(/reuses alias 2 of "Steam\/Flow"/);
    // The clashing metric's value does not land on the tag that owns alias 2.
    expect(result.samples.find((x) => x.tag === 'Plant1/Edge7/Steam/Flow')?.value).toBe(41.5);
    expect(result.samples.some((x) => x.value === 99)).toBe(false);
  });

  it('start a new session on every NBIRTH, which forgets the devices until their DBIRTH', () => {
    const s = born();
    // Section 4.2.1.1.2: after an NBIRTH, devices stay STALE until their new DBIRTH.
    send(s, 'NBIRTH', nbirth(4));
    const data = send(s, 'DDATA', { seq: 1, metrics: [{ alias: 10, doubleValue: 1 }] }, 'Boiler');
    expect(data.samples).toEqual([]);
    expect(data.rejected[0]?.code).toBe('SPARKPLUG_NO_BIRTH');
    expect(data.rejected[0]?.reason).toMatch(/^No DBIRTH from device "Boiler"/);
  });
});

describe('DATA messages', () => {
  it('resolve metrics that carry only an alias, with no name and no datatype', () => {
    // Section 6.4.6 (tck-id-payloads-alias-data-cmd-requirement): DATA metrics carry only the
    // alias; the datatype SHOULD NOT be sent (tck-id-payloads-metric-datatype-not-req). The value
    // must come through all the same.
    const s = born();
    const result = send(s, 'NDATA', {
      timestamp: T0 + 5_000,
      seq: 2,
      metrics: [
        { alias: 1, floatValue: 11.9, timestamp: T0 + 4_000 },
        { alias: 2, doubleValue: 42.25, timestamp: T0 + 4_000 },
      ],
    });
    expect(result.rejected).toEqual([]);
    // Float arrives as the nearest float32 (11.899999618530273) and is stored as the sender wrote it.
    expect(result.samples.map((x) => [x.tag, x.t, x.value])).toEqual([
      ['Plant1/Edge7/Supply Voltage', T0 + 4_000, 11.9],
      ['Plant1/Edge7/Steam/Flow', T0 + 4_000, 42.25],
    ]);
  });

  it('store Float values as the shortest decimal that gives the same float32', () => {
    const s = born();
    const written = [11.9, 0.1, 1234.567, 1e-7, -273.15, 16777217, 0.30000001];
    const result = send(s, 'NDATA', {
      seq: 2,
      metrics: written.map((floatValue, i) => ({ alias: 1, floatValue, timestamp: T0 + i })),
    });
    expect(result.samples.map((x) => x.value)).toEqual([
      11.9, 0.1, 1234.567, 1e-7, -273.15,
      // 2^24 + 1 has no float32; the nearest, 2^24, is what travelled.
      16777216,
      // 0.30000001 and 0.3 are the same float32, and 0.3 is the shorter.
      0.3,
    ]);
    for (const [i, sample] of result.samples.entries()) {
      expect(Math.fround(sample.value ?? Number.NaN)).toBe(Math.fround(written[i] ?? 0));
    }
  });

  it('read every numeric datatype, signed ones in either two’s complement width', () => {
    const s = session();
    const types: [string, number][] = [
      ['i8', DT.Int8],
      ['i8wide', DT.Int8],
      ['i16', DT.Int16],
      ['i32', DT.Int32],
      ['i64', DT.Int64],
      ['u8', DT.UInt8],
      ['u32', DT.UInt32],
      ['u64', DT.UInt64],
      ['bool', DT.Boolean],
    ];
    send(
      s,
      'NBIRTH',
      nbirth(
        0,
        types.map(([name, datatype], i) => ({
          name,
          alias: 100 + i,
          datatype,
          isNull: true,
          timestamp: T0,
        })),
      ),
    );
    const result = send(s, 'NDATA', {
      seq: 1,
      metrics: [
        { alias: 100, intValue: 0xff, timestamp: T0 }, // Int8 -1 in its own width
        { alias: 101, intValue: -1, timestamp: T0 }, // Int8 -1 as 32-bit two's complement
        { alias: 102, intValue: 0xfffe, timestamp: T0 },
        { alias: 103, intValue: -123456, timestamp: T0 },
        { alias: 104, longValue: -9007199254740991n, timestamp: T0 },
        { alias: 105, intValue: 200, timestamp: T0 },
        { alias: 106, intValue: 0xfffffffe, timestamp: T0 },
        { alias: 107, longValue: 9007199254740991n, timestamp: T0 },
        { alias: 108, booleanValue: true, timestamp: T0 },
      ],
    });
    expect(result.rejected).toEqual([]);
    expect(result.samples.map((x) => x.value)).toEqual([
      -1, -1, -2, -123456, -9007199254740991, 200, 4294967294, 9007199254740991, 1,
    ]);
  });

  it('quarantine 64-bit values beyond 2^53 − 1 instead of rounding them', () => {
    const s = session();
    send(
      s,
      'NBIRTH',
      nbirth(0, [{ name: 'Counter', alias: 30, datatype: DT.UInt64, longValue: 1, timestamp: T0 }]),
    );
    const result = send(s, 'NDATA', {
      seq: 1,
      metrics: [
        { alias: 30, longValue: 2n ** 53n + 1n, timestamp: T0 },
        { alias: 30, longValue: 5, timestamp: 2n ** 60n },
      ],
    });
    expect(result.samples).toEqual([]);
    expect(result.rejected.map((r) => r.code)).toEqual([
      'SPARKPLUG_VALUE_RANGE',
      'SPARKPLUG_VALUE_RANGE',
    ]);
    expect(result.rejected[0]?.reason).toMatch(/9007199254740993/);
    expect(result.rejected[0]?.tag).toBe('Plant1/Edge7/Counter');
    expect(JSON.parse(result.rejected[0]?.raw ?? '')).toMatchObject({
      longValue: '9007199254740993',
    });
    expect(result.rejected[1]?.reason).toMatch(/timestamp 1152921504606846976/);
  });

  it('store is_historical metrics as back-fill, not as live samples', () => {
    // Section 6.4.6: is_historical "denotes that the message should not be considered a real
    // time/current value".
    const s = born();
    const result = send(
      s,
      'DDATA',
      {
        seq: 2,
        timestamp: T0 + 10_000,
        metrics: [
          { alias: 10, doubleValue: 79, timestamp: T0 - 3_600_000, isHistorical: true },
          { alias: 10, doubleValue: 79.5, timestamp: T0 - 1_800_000, isHistorical: true },
          { alias: 10, doubleValue: 81, timestamp: T0 + 9_000 },
          { alias: 11, intValue: 4, isHistorical: true },
        ],
      },
      'Boiler',
    );
    expect(result.backfill.map((x) => [x.t, x.value])).toEqual([
      [T0 - 3_600_000, 79],
      [T0 - 1_800_000, 79.5],
    ]);
    expect(result.samples.map((x) => [x.t, x.value])).toEqual([[T0 + 9_000, 81]]);
    // A historical value needs its own time: the payload's is when it was sent.
    expect(result.rejected.map((r) => r.code)).toEqual(['TIME_MISSING']);
  });

  it('store is_null as a sample with no value', () => {
    const s = born();
    const result = send(s, 'NDATA', {
      seq: 2,
      metrics: [{ alias: 2, isNull: true, timestamp: T0 }],
    });
    // checkSample gives a sample with no value bad quality unless the sender said otherwise.
    expect(result.samples.map((x) => [x.tag, x.value, x.quality])).toEqual([
      ['Plant1/Edge7/Steam/Flow', null, QUALITY_BAD],
    ]);
  });

  it('take the Quality property as the sample quality', () => {
    // Section 6.4.9.1: property 'Quality', type 3 (Int32), int_value 0 BAD, 192 GOOD, 500 STALE.
    const quality = (q: number): MetricInput['properties'] => ({
      keys: ['Quality'],
      values: [{ type: DT.Int32, intValue: q }],
    });
    const s = born();
    const result = send(s, 'NDATA', {
      seq: 2,
      metrics: [
        { alias: 2, doubleValue: 1, timestamp: T0 + 1, properties: quality(0) },
        { alias: 2, doubleValue: 2, timestamp: T0 + 2, properties: quality(500) },
        { alias: 2, doubleValue: 3, timestamp: T0 + 3, properties: quality(192) },
        { alias: 2, doubleValue: 4, timestamp: T0 + 4 },
      ],
    });
    expect(result.samples.map((x) => x.quality)).toEqual([
      QUALITY_BAD,
      QUALITY_STALE,
      QUALITY_GOOD,
      QUALITY_GOOD,
    ]);
  });

  it('judge every candidate with checkSample, valid ranges included', () => {
    const s = session({
      validRange: (tag) => (tag === 'Plant1/Edge7/Steam/Flow' ? { min: 0, max: 100 } : undefined),
    });
    send(s, 'NBIRTH', nbirth(0));
    const result = send(s, 'NDATA', {
      seq: 1,
      metrics: [
        { alias: 2, doubleValue: 150, timestamp: T0 },
        { alias: 2, doubleValue: Number.NaN, timestamp: T0 + 1 },
        { alias: 2, doubleValue: 5, timestamp: ctx.now + 3_600_000 },
      ],
    });
    expect(result.rejected.map((r) => r.code)).toEqual([
      'VALUE_OUT_OF_RANGE',
      'VALUE_NOT_FINITE',
      'TIME_IN_FUTURE',
    ]);
    expect(result.rejected[0]?.reason).toMatch(/^Metric "Steam\/Flow": the value 150 is above/);
  });

  it('take a live value without any timestamp at the receive time', () => {
    const s = born();
    const result = send(s, 'NDATA', { seq: 2, metrics: [{ alias: 2, doubleValue: 7 }] });
    expect(result.samples[0]?.t).toBe(ctx.receivedAt);
  });

  it('quarantine DATA before any BIRTH, saying why and until when', () => {
    const s = session();
    const result = send(s, 'NDATA', { seq: 5, metrics: [{ alias: 2, doubleValue: 7 }] });
    expect(result.samples).toEqual([]);
    expect(result.rejected).toHaveLength(1);
    expect(result.rejected[0]?.code).toBe('SPARKPLUG_NO_BIRTH');
    expect(result.rejected[0]?.reason).toMatch(
      /^No NBIRTH from edge node Plant1\/Edge7 has been seen since this service started.*does not request rebirths.*next NBIRTH/,
    );
    expect(JSON.parse(result.rejected[0]?.raw ?? '')).toMatchObject({ seq: '5' });
  });

  it('quarantine an alias the BIRTH did not announce', () => {
    const s = born();
    const result = send(s, 'NDATA', {
      seq: 2,
      metrics: [
        { alias: 77, doubleValue: 7 },
        { alias: 2, doubleValue: 8, timestamp: T0 },
        { doubleValue: 9 },
      ],
    });
    expect(result.rejected.map((r) => r.code)).toEqual([
      'SPARKPLUG_UNKNOWN_ALIAS',
      'SPARKPLUG_INVALID',
    ]);
    expect(result.rejected[0]?.reason).toMatch(/^Alias 77 was not announced in the NBIRTH/);
    expect(result.samples.map((x) => x.value)).toEqual([8]);
  });

  it('skip strings, bytes, data sets, templates and transient metrics with a count', () => {
    const s = session();
    send(
      s,
      'NBIRTH',
      nbirth(0, [
        { name: 'Text', alias: 40, datatype: DT.String, stringValue: 'a', timestamp: T0 },
        { name: 'Blob', alias: 41, datatype: DT.Bytes, bytesValue: new Uint8Array([1]) },
        {
          name: 'Table',
          alias: 42,
          datatype: DT.DataSet,
          datasetValue: { numOfColumns: 1, columns: ['a'], types: [DT.Int32], rows: [] },
        },
        {
          name: 'Pump',
          alias: 43,
          datatype: DT.Template,
          templateValue: { templateRef: 'PumpType', isDefinition: false, metrics: [] },
        },
        { name: 'Scratch', alias: 44, datatype: DT.Double, isTransient: true, doubleValue: 1 },
      ]),
    );
    const result = send(s, 'NDATA', {
      seq: 1,
      metrics: [40, 41, 42, 43, 44].map((alias) => ({ alias, stringValue: 'x' })),
    });
    expect(result.rejected).toEqual([]);
    expect(result.samples).toEqual([]);
    expect(result.skipped).toEqual({ notNumeric: 4, control: 0, transient: 1 });
  });
});

describe('seq', () => {
  it('reports a gap with the seq expected and the one that came', () => {
    // Section 6.4.5: seq rises by one with every message of the edge node, 255 wraps to 0.
    const s = born();
    const ok = send(s, 'NDATA', { seq: 2, metrics: [{ alias: 2, doubleValue: 1, timestamp: T0 }] });
    expect(ofType(ok.events, 'seq-gap')).toEqual([]);
    const gap = send(s, 'NDATA', {
      seq: 5,
      metrics: [{ alias: 2, doubleValue: 2, timestamp: T0 + 1 }],
    });
    expect(ofType(gap.events, 'seq-gap')).toEqual([
      { type: 'seq-gap', node: 'Plant1/Edge7', expected: 3, got: 5, at: ctx.receivedAt },
    ]);
    // The data of the message after a gap is still good: the aliases have not changed.
    expect(gap.samples.map((x) => x.value)).toEqual([2]);
    // Counting starts again from the seq that came.
    const next = send(s, 'NDATA', { seq: 6, metrics: [] });
    expect(ofType(next.events, 'seq-gap')).toEqual([]);
  });

  it('wraps from 255 to 0 without a gap, and counts DBIRTH and DDEATH in the same sequence', () => {
    const s = born(); // NBIRTH 0, DBIRTH 1
    const gaps: SparkplugEvent[] = [];
    for (let seq = 2; seq <= 255; seq++) gaps.push(...send(s, 'NDATA', { seq }).events);
    gaps.push(...send(s, 'DDATA', { seq: 0 }, 'Boiler').events);
    gaps.push(...send(s, 'DDEATH', { seq: 1, timestamp: T0 }, 'Boiler').events);
    gaps.push(...send(s, 'NDATA', { seq: 2 }).events);
    expect(ofType(gaps, 'seq-gap')).toEqual([]);
  });

  it('reports a missing seq as a gap with nothing got', () => {
    const s = born();
    const result = send(s, 'NDATA', { metrics: [] });
    expect(ofType(result.events, 'seq-gap')).toEqual([
      { type: 'seq-gap', node: 'Plant1/Edge7', expected: 2, got: null, at: ctx.receivedAt },
    ]);
  });
});

describe('DEATH messages', () => {
  const later = { receivedAt: T0 + 120_000, now: T0 + 120_000 };

  it('ignore an NDEATH whose bdSeq is not the current NBIRTH’s', () => {
    // Section 4.2.1.3: only an NDEATH with the bdSeq of the preceding NBIRTH ends the session;
    // a late will from an older connection must not.
    const s = born();
    const result = send(s, 'NDEATH', {
      timestamp: T0,
      metrics: [{ name: 'bdSeq', datatype: DT.Int64, longValue: 2 }],
    });
    expect(ofType(result.events, 'death')).toEqual([
      {
        type: 'death',
        node: 'Plant1/Edge7',
        device: null,
        bdSeq: 2,
        matched: false,
        reason: "its bdSeq 2 is not the current NBIRTH's 3",
        at: ctx.receivedAt,
      },
    ]);
    expect(result.samples).toEqual([]);
    expect(ofType(result.events, 'stale-tags')).toEqual([]);
    expect(s.nodes()[0]?.online).toBe(true);
  });

  it('mark every tag of the node and its devices stale on the matching NDEATH', () => {
    // Section 5.5: on NDEATH the host marks all NBIRTH and DBIRTH metrics STALE at its own time.
    const s = born();
    const result = send(
      s,
      'NDEATH',
      { metrics: [{ name: 'bdSeq', datatype: DT.Int64, longValue: 3 }] },
      undefined,
      later,
    );
    const tags = [
      'Plant1/Edge7/Supply Voltage',
      'Plant1/Edge7/Steam/Flow',
      'Plant1/Edge7/Boiler/Temp',
      'Plant1/Edge7/Boiler/Level',
    ];
    expect(result.events).toEqual([
      {
        type: 'death',
        node: 'Plant1/Edge7',
        device: null,
        bdSeq: 3,
        matched: true,
        reason: null,
        at: later.receivedAt,
      },
      { type: 'stale-tags', node: 'Plant1/Edge7', device: null, tags, at: later.receivedAt },
    ]);
    expect(result.samples.map((x) => [x.tag, x.t, x.value, x.quality])).toEqual(
      tags.map((tag) => [tag, later.receivedAt, null, QUALITY_STALE]),
    );
    // After the death, DATA waits for the next NBIRTH.
    const data = send(s, 'NDATA', { seq: 2, metrics: [{ alias: 2, doubleValue: 1 }] });
    expect(data.rejected[0]?.code).toBe('SPARKPLUG_NO_BIRTH');
    expect(data.rejected[0]?.reason).toMatch(/sent its NDEATH and no NBIRTH since/);
    // A repeated NDEATH finds nothing to end.
    const again = send(s, 'NDEATH', { metrics: [{ name: 'bdSeq', longValue: 3 }] });
    expect(ofType(again.events, 'death')[0]?.matched).toBe(false);
  });

  it('mark only the device’s tags stale on DDEATH, at the DDEATH’s timestamp', () => {
    // Section 5.7: DDEATH makes the device's metrics STALE "using the timestamp in the DDEATH payload".
    const s = born();
    const result = send(s, 'DDEATH', { seq: 2, timestamp: T0 + 90_000 }, 'Boiler');
    expect(ofType(result.events, 'stale-tags')).toEqual([
      {
        type: 'stale-tags',
        node: 'Plant1/Edge7',
        device: 'Boiler',
        tags: ['Plant1/Edge7/Boiler/Temp', 'Plant1/Edge7/Boiler/Level'],
        at: ctx.receivedAt,
      },
    ]);
    expect(result.samples.every((x) => x.t === T0 + 90_000 && x.quality === QUALITY_STALE)).toBe(
      true,
    );
    const data = send(s, 'DDATA', { seq: 3, metrics: [{ alias: 10, doubleValue: 1 }] }, 'Boiler');
    expect(data.rejected[0]?.reason).toMatch(/sent its DDEATH and no DBIRTH since/);
    // The node itself lives on.
    const node = send(s, 'NDATA', {
      seq: 4,
      metrics: [{ alias: 2, doubleValue: 1, timestamp: T0 }],
    });
    expect(node.samples).toHaveLength(1);
  });
});

describe('other messages', () => {
  it('note STATE messages of Host Applications', () => {
    // Section 4.2.3: spBv1.0/STATE/<host id>, UTF-8 JSON {"online": bool, "timestamp": ms}.
    const s = session();
    const online = s.handle(
      'spBv1.0/STATE/scada-1',
      new TextEncoder().encode(JSON.stringify({ online: true, timestamp: T0 })),
      ctx,
    );
    expect(online.events).toEqual([
      { type: 'state', hostId: 'scada-1', online: true, timestamp: T0, at: ctx.receivedAt },
    ]);
    const garbled = s.handle('spBv1.0/STATE/scada-1', new TextEncoder().encode('ONLINE'), ctx);
    expect(garbled.rejected.map((r) => [r.code, r.raw])).toEqual([['SPARKPLUG_DECODE', 'ONLINE']]);
    const cleared = s.handle('spBv1.0/STATE/scada-1', new Uint8Array(0), ctx);
    expect(cleared.rejected).toEqual([]);
    expect(cleared.events.map((e) => e.type)).toEqual(['ignored']);
  });

  it('leave commands and other groups alone, and quarantine what is not Sparkplug', () => {
    const s = born();
    const command = send(s, 'NCMD', {
      timestamp: T0,
      metrics: [{ name: 'Node Control/Rebirth', datatype: DT.Boolean, booleanValue: true }],
    });
    expect(command.events.map((e) => e.type)).toEqual(['ignored']);
    const other = s.handle('spBv1.0/Other/NDATA/x', encodeSparkplugPayload({ seq: 1 }), ctx);
    expect(other.events.map((e) => e.type)).toEqual(['ignored']);
    const json = s.handle(topic('NDATA'), new TextEncoder().encode('{"value": 21.5}'), ctx);
    expect(json.rejected.map((r) => r.code)).toEqual(['SPARKPLUG_DECODE']);
    expect(json.rejected[0]?.raw).toMatch(/^base64:/);
    const badTopic = s.handle('spBv1.0/Plant1/NDATA/Edge7/extra', encodeSparkplugPayload({}), ctx);
    expect(badTopic.rejected.map((r) => r.code)).toEqual(['SPARKPLUG_INVALID']);
    const big = createSparkplugSession({ groups: [GROUP], maxPayloadBytes: 10 });
    const tooBig = big.handle(topic('NBIRTH'), encodeSparkplugPayload(nbirth(0)), ctx);
    expect(tooBig.rejected.map((r) => r.code)).toEqual(['PAYLOAD_TOO_LARGE']);
  });

  it('never throws, whatever the bytes', () => {
    const s = born();
    const types = ['NBIRTH', 'DBIRTH', 'NDATA', 'DDATA', 'NDEATH', 'DDEATH', 'STATE'];
    fc.assert(
      fc.property(fc.constantFrom(...types), fc.uint8Array({ maxLength: 200 }), (type, bytes) => {
        const t =
          type === 'STATE'
            ? 'spBv1.0/STATE/h'
            : topic(type, type.startsWith('D') ? 'Boiler' : undefined);
        const result = s.handle(t, bytes, ctx);
        for (const sample of [...result.samples, ...result.backfill]) {
          expect(sample.value === null || Number.isFinite(sample.value)).toBe(true);
        }
      }),
      { numRuns: 500 },
    );
  });
});

describe('options', () => {
  it('list every problem at once', () => {
    expect(
      sparkplugOptionProblems({
        groups: ['', 'a/b', 'STATE', 'x', 'x'],
        tagTemplate: '{node}/{tag}',
        maxFutureMs: -1,
      }),
    ).toEqual([
      'the group id is empty.',
      'the group id "a/b" contains "+", "/" or "#".',
      '"STATE" is reserved and cannot be a group id.',
      'a Sparkplug group is listed twice.',
      'the tag template "{node}/{tag}" does not use {metric}.',
      'the tag template uses {tag}; only {group}, {node}, {device} and {metric} exist.',
      'maxFutureMs must be a whole number of at least 0.',
    ]);
    expect(() => createSparkplugSession({ groups: [] })).toThrow(/no Sparkplug group/);
  });
});
