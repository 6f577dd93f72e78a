import { describe, expect, it } from 'vitest';
import {
  matchTopic,
  type MqttMessageContext,
  parseMqttMessage,
  type SubscriptionSpec,
  subscriptionProblems,
  tagFromTopic,
  topicFilterProblem,
} from './mqtt-payload.js';

const NOW = Date.UTC(2026, 2, 1, 12);
const RECEIVED = NOW - 3;
const T = Date.UTC(2026, 2, 1, 11);
const ctx: MqttMessageContext = {
  receivedAt: RECEIVED,
  now: NOW,
  maxFutureMs: 60_000,
  maxPayloadBytes: 1024,
};
const bytes = (text: string): Uint8Array => new TextEncoder().encode(text);

describe('matchTopic', () => {
  // The examples of MQTT 3.1.1 (OASIS Standard, 2014), section 4.7; from memory.
  const cases: [string, string, boolean][] = [
    ['sport/tennis/player1/#', 'sport/tennis/player1', true],
    ['sport/tennis/player1/#', 'sport/tennis/player1/ranking', true],
    ['sport/tennis/player1/#', 'sport/tennis/player1/score/wimbledon', true],
    ['sport/#', 'sport', true],
    ['sport/tennis/+', 'sport/tennis/player1', true],
    ['sport/tennis/+', 'sport/tennis/player1/tournament', false],
    ['sport/+', 'sport', false],
    ['sport/+', 'sport/', true],
    ['+/+', '/finance', true],
    ['/+', '/finance', true],
    ['+', '/finance', false],
    ['#', '$SYS/broker/load', false],
    ['+/monitor/Clients', '$SYS/monitor/Clients', false],
    ['$SYS/#', '$SYS/monitor/Clients', true],
    ['$SYS/monitor/+', '$SYS/monitor/Clients', true],
    ['site/+/+/pv', 'site/north/evap1/pv', true],
    ['site/+/+/pv', 'site/north/evap1/sp', false],
    ['Site/#', 'site/north', false],
    ['$share/ingest/site/#', 'site/north', true],
  ];
  for (const [filter, topic, matches] of cases) {
    it(`${matches ? 'matches' : 'does not match'} ${topic} with ${filter}`, () => {
      const levels = matchTopic(filter, topic);
      if (matches) expect(levels).toEqual(topic.split('/'));
      else expect(levels).toBeNull();
    });
  }

  it('matches nothing with an invalid filter or a topic that holds wildcards', () => {
    expect(matchTopic('sport/tennis#', 'sport/tennis#')).toBeNull();
    expect(matchTopic('sport/#/ranking', 'sport/x/ranking')).toBeNull();
    expect(matchTopic('#', 'a/+/b')).toBeNull();
    expect(matchTopic('#', '')).toBeNull();
  });
});

describe('topicFilterProblem', () => {
  it('explains what is wrong with a filter', () => {
    expect(topicFilterProblem('site/+/pv')).toBeNull();
    expect(topicFilterProblem('sport/#/ranking')).toBe(
      'in the topic filter "sport/#/ranking", "#" may only be the last level.',
    );
    expect(topicFilterProblem('sport+')).toBe(
      'in the topic filter "sport+", a wildcard must fill a whole level.',
    );
    expect(topicFilterProblem('')).toBe('the topic filter is empty.');
    expect(topicFilterProblem('$share/g')).toBe(
      'the shared subscription "$share/g" needs a group name and a filter.',
    );
  });
});

describe('tagFromTopic', () => {
  it('fills 1-based levels and the levels under a trailing #', () => {
    expect(tagFromTopic('{2}.{3}', ['site', 'north', 'evap1', 'pv'])).toBe('north.evap1');
    expect(tagFromTopic('plant.{#}', ['plant', 'a', 'b'], 'plant/#')).toBe('plant.a/b');
    expect(tagFromTopic('{#}', ['x', 'y'], '$share/g/#')).toBe('x/y');
    expect(tagFromTopic('fixed-name', ['a'])).toBe('fixed-name');
  });

  it('gives null when a placeholder has nothing to fill it', () => {
    expect(tagFromTopic('{3}', ['a', 'b'])).toBeNull();
    expect(tagFromTopic('{0}', ['a'])).toBeNull();
    expect(tagFromTopic('{#}', ['a', 'b'], 'a/+')).toBeNull();
    expect(tagFromTopic('{#}', ['a', 'b'])).toBeNull();
  });
});

describe('subscriptionProblems', () => {
  it('lists every problem of a subscription at once', () => {
    expect(subscriptionProblems({ filter: 'site/+/+/pv', tag: '{2}.{3}', format: 'json' })).toEqual(
      [],
    );
    const bad = {
      filter: 'site/+',
      tag: '{3}.{#}',
      format: 'xml',
      timeUnit: 'h',
      valueField: 'a..b',
    } as unknown as SubscriptionSpec;
    expect(subscriptionProblems(bad)).toEqual([
      'the tag template uses {3} but the filter "site/+" has 2 levels.',
      'the tag template uses {#} but the filter "site/+" does not end in "#".',
      'the format "xml" is neither "number" nor "json".',
      'the time unit "h" is neither "ms" nor "s".',
      'the value field "a..b" is not a dot path such as "value" or "pv.val".',
    ]);
  });
});

describe('parseMqttMessage, format number', () => {
  const spec: SubscriptionSpec = { filter: 'site/+/+/pv', tag: '{2}.{3}', format: 'number' };
  const topic = 'site/north/evap1/pv';

  it('reads a bare number, stamped with the receive time', () => {
    expect(parseMqttMessage(spec, topic, bytes(' 12.5\n'), ctx)).toEqual({
      samples: [
        {
          tag: 'north.evap1',
          t: RECEIVED,
          value: 12.5,
          quality: 192,
          source: 'mqtt:site/north/evap1/pv',
          receivedAt: RECEIVED,
        },
      ],
      rejected: [],
    });
  });

  it('keeps "null" as an explicit missing value', () => {
    const { samples } = parseMqttMessage(spec, topic, bytes('null'), ctx);
    expect(samples.map((s) => [s.value, s.quality])).toEqual([[null, 0]]);
  });

  it('rejects text, NaN and an empty payload, naming the value', () => {
    const reasons = ['abc', 'NaN', '', '{"value":1}'].map((text) => {
      const { samples, rejected } = parseMqttMessage(spec, topic, bytes(text), ctx);
      expect(samples).toEqual([]);
      return rejected.map((r) => [r.code, r.reason, r.raw, r.tag]);
    });
    expect(reasons).toEqual([
      [['VALUE_NOT_NUMBER', 'The value "abc" is not a number.', 'abc', 'north.evap1']],
      [['VALUE_NOT_FINITE', 'The value "NaN" is not a finite number.', 'NaN', 'north.evap1']],
      [['VALUE_NOT_NUMBER', 'The payload is empty, so it holds no value.', '', 'north.evap1']],
      [
        [
          'VALUE_NOT_NUMBER',
          'The value "{\\"value\\":1}" is not a number.',
          '{"value":1}',
          'north.evap1',
        ],
      ],
    ]);
  });

  it('applies the valid range of the tag', () => {
    const ranged = { ...ctx, validRange: () => ({ min: 0, max: 10 }) };
    const { rejected } = parseMqttMessage(spec, topic, bytes('11'), ranged);
    expect(rejected.map((r) => r.reason)).toEqual([
      'The value 11 is above the valid maximum 10 of tag "north.evap1".',
    ]);
  });
});

describe('parseMqttMessage, format json', () => {
  const spec: SubscriptionSpec = { filter: 'plant/#', tag: '{#}', format: 'json' };
  const topic = 'plant/evap1/steam';

  it('reads value, time and quality from an object', () => {
    const payload = '{"value": 3.5, "time": "2026-03-01T11:00:00Z", "quality": 64}';
    const { samples, rejected } = parseMqttMessage(spec, topic, bytes(payload), ctx);
    expect(rejected).toEqual([]);
    expect(samples).toEqual([
      {
        tag: 'evap1/steam',
        t: T,
        value: 3.5,
        quality: 64,
        source: 'mqtt:plant/evap1/steam',
        receivedAt: RECEIVED,
      },
    ]);
  });

  it('uses the receive time when a live object has none', () => {
    const { samples } = parseMqttMessage(spec, topic, bytes('{"value": "7"}'), ctx);
    expect(samples.map((s) => [s.t, s.value])).toEqual([[RECEIVED, 7]]);
  });

  it('follows configured dot paths and epoch seconds', () => {
    const custom: SubscriptionSpec = {
      ...spec,
      valueField: 'pv.val',
      timeField: 'pv.ts',
      qualityField: 'pv.q',
      timeUnit: 's',
    };
    const payload = JSON.stringify({ pv: { val: 1.25, ts: T / 1000, q: 192 } });
    const { samples } = parseMqttMessage(custom, topic, bytes(payload), ctx);
    expect(samples.map((s) => [s.t, s.value, s.quality])).toEqual([[T, 1.25, 192]]);
    const { rejected } = parseMqttMessage(custom, topic, bytes('{"pv": {"ts": 1}}'), ctx);
    expect(rejected.map((r) => r.reason)).toEqual([
      'The time 1 (field "pv.ts") read as epoch seconds is 1970-01-01T00:00:01.000Z, before 1973.',
    ]);
    const { rejected: noValue } = parseMqttMessage(custom, topic, bytes('{"pv": {}}'), ctx);
    expect(noValue.map((r) => [r.code, r.reason])).toEqual([
      ['VALUE_NOT_NUMBER', 'The value (field "pv.val") is missing.'],
    ]);
  });

  it('does not take inherited properties for fields', () => {
    const inherited: SubscriptionSpec = { ...spec, valueField: 'constructor' };
    const { rejected } = parseMqttMessage(inherited, topic, bytes('{}'), ctx);
    expect(rejected.map((r) => r.reason)).toEqual(['The value (field "constructor") is missing.']);
  });

  it('keeps the good elements of a partly bad backfill array', () => {
    const payload = JSON.stringify([
      { time: T, value: 1 },
      { value: 2 },
      { time: T + 1000, value: 'x' },
      5,
      { time: '2026-03-01T11:00:02Z', value: null },
    ]);
    const { samples, rejected } = parseMqttMessage(spec, topic, bytes(payload), ctx);
    expect(samples.map((s) => [s.t, s.value, s.quality])).toEqual([
      [T, 1, 192],
      [T + 2000, null, 0],
    ]);
    expect(rejected.map((r) => [r.code, r.reason, r.raw])).toEqual([
      [
        'TIME_MISSING',
        'At index 1: the time (field "time") is missing; every element of an array is a backfill sample, which needs its own time.',
        '{"value":2}',
      ],
      [
        'VALUE_NOT_NUMBER',
        'At index 2: the value "x" (field "value") is not a number.',
        `{"time":${T + 1000},"value":"x"}`,
      ],
      [
        'PAYLOAD_SHAPE',
        'At index 3: the element is a number, not an object with a "value" field.',
        '5',
      ],
    ]);
  });

  it('rejects what cannot be read at all as one entry holding the payload', () => {
    const one = (payload: Uint8Array, s = spec) => {
      const { samples, rejected } = parseMqttMessage(s, topic, payload, ctx);
      expect(samples).toEqual([]);
      expect(rejected).toHaveLength(1);
      const [entry] = rejected;
      return [entry?.code, entry?.reason, entry?.raw];
    };
    expect(one(bytes('{"value": 1'))).toEqual([
      'PAYLOAD_NOT_JSON',
      expect.stringMatching(/^The payload is not valid JSON \(.+\)\.$/) as unknown,
      '{"value": 1',
    ]);
    expect(one(bytes('12.5'))).toEqual([
      'PAYLOAD_SHAPE',
      'The JSON payload is a number, but this subscription expects an object with a "value" field, or an array of them (a bare number needs format "number").',
      '12.5',
    ]);
    expect(one(bytes('[]'))).toEqual([
      'PAYLOAD_SHAPE',
      'The payload is an empty JSON array, so it holds no samples.',
      '[]',
    ]);
    expect(one(new Uint8Array([0x7b, 0xff, 0xfe, 0x7d]))).toEqual([
      'PAYLOAD_NOT_UTF8',
      'The payload is not valid UTF-8 text; the raw field shows its bytes.',
      '{\\xff\\xfe}',
    ]);
    expect(one(bytes(`{"value": "${'x'.repeat(2000)}"}`))).toEqual([
      'PAYLOAD_TOO_LARGE',
      'The payload is 2013 bytes; at most 1024 are allowed.',
      `{"value": "${'x'.repeat(2000)}"}`,
    ]);
  });

  it('rejects a message whose topic names no tag', () => {
    const { rejected } = parseMqttMessage(spec, 'other/x', bytes('{"value":1}'), ctx);
    expect(rejected.map((r) => [r.code, r.reason, r.source])).toEqual([
      [
        'TAG_NAME_INVALID',
        'The topic "other/x" does not match the filter "plant/#", so it names no tag.',
        'mqtt:other/x',
      ],
    ]);
    const { rejected: empty } = parseMqttMessage(spec, 'plant', bytes('{"value":1}'), ctx);
    expect(empty.map((r) => r.reason)).toEqual(['The tag name is empty.']);
    const deep: SubscriptionSpec = { ...spec, tag: '{4}' };
    const { rejected: short } = parseMqttMessage(deep, 'plant/a', bytes('{"value":1}'), ctx);
    expect(short.map((r) => [r.code, r.reason])).toEqual([
      [
        'TAG_NAME_INVALID',
        'The tag template "{4}" refers to topic levels that "plant/a" does not have.',
      ],
    ]);
  });

  it('copes with a payload nested too deeply to write back as JSON', () => {
    const depth = 200_000;
    const payload = bytes(`[${'['.repeat(depth)}${']'.repeat(depth)}]`);
    const { samples, rejected } = parseMqttMessage(spec, topic, payload, {
      ...ctx,
      maxPayloadBytes: 1e6,
    });
    expect(samples).toEqual([]);
    expect(rejected.map((r) => [r.code, r.reason])).toEqual([
      ['PAYLOAD_SHAPE', 'At index 0: the element is an array, not an object with a "value" field.'],
    ]);
  });
});
