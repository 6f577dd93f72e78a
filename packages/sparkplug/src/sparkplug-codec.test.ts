import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { SparkplugDataType } from './sparkplug-b-schema.js';
import {
  decodeSparkplugPayload,
  encodeSparkplugPayload,
  int64ToNumber,
  int64ToText,
  metricToJson,
  payloadToJson,
} from './sparkplug-codec.js';

/** 1.5 as a little-endian IEEE 754 double. */
const ONE_AND_A_HALF = [0x00, 0x00, 0x00, 0x00, 0x00, 0x00, 0xf8, 0x3f];

describe('the Sparkplug B schema on the wire', () => {
  // Field numbers and types from Eclipse Tahu sparkplug_b.proto (Sparkplug 3.0 section 6.4.1).
  // Protobuf keys are (field number << 3) | wire type, wire type 0 varint, 1 fixed64, 2 length-
  // delimited, 5 fixed32 (Protocol Buffers encoding guide, from memory).
  it('reads hand-made bytes: payload seq (3), metric alias (2) and double_value (13)', () => {
    const bytes = Uint8Array.from([
      0x18, 0x07, // Payload.seq = 7
      0x12, 0x0b, // Payload.metrics, 11 bytes
      0x10, 0x05, // Metric.alias = 5
      0x69, ...ONE_AND_A_HALF, // Metric.double_value = 1.5
    ]); // prettier-ignore
    const payload = decodeSparkplugPayload(bytes);
    expect(int64ToNumber(payload.seq ?? -1, false)).toBe(7);
    expect(payload.metrics).toHaveLength(1);
    const metric = payload.metrics[0];
    expect(metric?.doubleValue).toBe(1.5);
    expect(int64ToNumber(metric?.alias ?? -1, false)).toBe(5);
    // An alias-only DATA metric has no name and no datatype on the wire, and the value survives.
    expect(Object.hasOwn(metric ?? {}, 'name')).toBe(false);
    expect(Object.hasOwn(metric ?? {}, 'datatype')).toBe(false);
  });

  it('writes the fields under the numbers of the published schema', () => {
    const bytes = encodeSparkplugPayload({
      timestamp: 1,
      seq: 2,
      metrics: [
        {
          name: 'A',
          alias: 3,
          timestamp: 4,
          datatype: SparkplugDataType.Int32,
          isHistorical: true,
          isNull: true,
          intValue: 6,
          properties: { keys: ['Quality'], values: [{ type: 3, intValue: 192 }] },
        },
      ],
    });
    expect([...bytes]).toEqual([
      0x08, 0x01, // Payload.timestamp (1) = 1
      0x12, 0x21, // Payload.metrics (2), 33 bytes
      0x0a, 0x01, 0x41, // Metric.name (1) = "A"
      0x10, 0x03, // Metric.alias (2) = 3
      0x18, 0x04, // Metric.timestamp (3) = 4
      0x20, 0x03, // Metric.datatype (4) = Int32 (3)
      0x28, 0x01, // Metric.is_historical (5)
      0x38, 0x01, // Metric.is_null (7)
      0x4a, 0x10, // Metric.properties (9), 16 bytes
      0x0a, 0x07, 0x51, 0x75, 0x61, 0x6c, 0x69, 0x74, 0x79, // PropertySet.keys (1) = "Quality"
      0x12, 0x05, 0x08, 0x03, 0x18, 0xc0, 0x01, // PropertySet.values (2): type 3, int_value (3) = 192
      0x50, 0x06, // Metric.int_value (10) = 6
      0x18, 0x02, // Payload.seq (3) = 2
    ]); // prettier-ignore
  });

  it('writes negative signed integers as two’s complement in the unsigned fields', () => {
    // Section 6.4.17: Int8..Int32 travel in uint32, Int64 in uint64.
    const payload = decodeSparkplugPayload(
      encodeSparkplugPayload({
        metrics: [
          { alias: 1, intValue: -1 },
          { alias: 2, longValue: -5 },
        ],
      }),
    );
    expect(payload.metrics[0]?.intValue).toBe(0xffffffff);
    const long = payload.metrics[1]?.longValue ?? 0;
    expect(int64ToText(long, false)).toBe('18446744073709551611');
    expect(int64ToNumber(long, true)).toBe(-5);
  });

  it('rejects bytes that are no protobuf message with an error', () => {
    // A length that runs past the end.
    expect(() => decodeSparkplugPayload(Uint8Array.from([0x12, 0x40, 0x00]))).toThrow();
    // 0x7f is field 15 with wire type 7, which does not exist.
    expect(() => decodeSparkplugPayload(Uint8Array.from([0x7f, 0x01]))).toThrow(/wire type 7/);
    // JSON sent to a Sparkplug topic by mistake: '{' reads as field 15, a group, and runs off the end.
    const json = new TextEncoder().encode('{"value": 21.5}');
    expect(() => decodeSparkplugPayload(json)).toThrow();
  });

  it('renders payloads and metrics as JSON with 64-bit fields as text', () => {
    const payload = decodeSparkplugPayload(
      encodeSparkplugPayload({ seq: 1, metrics: [{ alias: '9007199254740993', doubleValue: 2 }] }),
    );
    expect(JSON.parse(payloadToJson(payload))).toEqual({
      seq: '1',
      metrics: [{ alias: '9007199254740993', doubleValue: 2 }],
    });
    const metric = payload.metrics[0];
    expect(metric).toBeDefined();
    if (metric !== undefined) {
      expect(JSON.parse(metricToJson(metric))).toEqual({
        alias: '9007199254740993',
        doubleValue: 2,
      });
    }
  });
});

describe('int64ToNumber', () => {
  const max = Number.MAX_SAFE_INTEGER;

  it('keeps every integer up to 2^53 − 1 and refuses the rest rather than rounding', () => {
    expect(int64ToNumber({ low: -1, high: 0x1fffff, unsigned: true }, false)).toBe(max);
    expect(int64ToNumber({ low: 0, high: 0x200000, unsigned: true }, false)).toBeNull();
    expect(int64ToNumber({ low: 1, high: 0x200000, unsigned: true }, false)).toBeNull();
    expect(int64ToNumber({ low: -1, high: -1, unsigned: true }, false)).toBeNull();
    expect(int64ToNumber({ low: 1, high: -0x200000 }, true)).toBe(-max);
    expect(int64ToNumber({ low: 0, high: -0x200000 }, true)).toBeNull();
    expect(int64ToNumber(2 ** 53, false)).toBeNull();
    expect(int64ToNumber(42, false)).toBe(42);
  });

  it('agrees with BigInt on random 64-bit patterns', () => {
    fc.assert(
      fc.property(fc.bigInt({ min: 0n, max: 2n ** 64n - 1n }), fc.boolean(), (bits, signed) => {
        const value = {
          low: Number(bits & 0xffffffffn) | 0,
          high: Number(bits >> 32n) | 0,
        };
        const exact = signed ? BigInt.asIntN(64, bits) : bits;
        const safe = exact <= BigInt(max) && exact >= -BigInt(max);
        expect(int64ToNumber(value, signed)).toBe(safe ? Number(exact) : null);
        expect(int64ToText(value, signed)).toBe(String(exact));
      }),
    );
  });
});
