import { describe, expect, it } from 'vitest';
import { parseClusterMessage } from './listener.js';

describe('parseClusterMessage', () => {
  it('takes each kind of message the store sends', () => {
    const messages = [
      { kind: 'samples', shards: [0, 3] },
      { kind: 'alert', origin: 'a', alertId: 7, change: 'opened' },
      { kind: 'evidence', origin: 'a', snapshotId: 9 },
      { kind: 'mark', origin: 'b', markId: 'm-1', change: 'withdrawn' },
    ];
    for (const message of messages) {
      expect(parseClusterMessage(JSON.stringify(message))).toEqual(message);
    }
  });

  it('drops anything else, since anyone with access can notify the channel', () => {
    for (const payload of [
      undefined,
      '',
      'not json',
      'null',
      '[]',
      '{"kind":"samples","shards":[1.5]}',
      '{"kind":"alert","origin":"a","alertId":7,"change":"deleted"}',
      '{"kind":"evidence","origin":1,"snapshotId":9}',
      '{"kind":"mark","origin":"a","markId":5,"change":"created"}',
      '{"kind":"shutdown"}',
    ]) {
      expect(parseClusterMessage(payload)).toBeNull();
    }
  });

  it('keeps only the fields of the message', () => {
    expect(
      parseClusterMessage('{"kind":"evidence","origin":"a","snapshotId":9,"extra":"x"}'),
    ).toEqual({ kind: 'evidence', origin: 'a', snapshotId: 9 });
  });
});
