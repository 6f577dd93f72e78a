import { describe, expect, it } from 'vitest';
import { conflictReason, cutUtf8, markFromRow, pendingMigrations } from './sql-rows.js';

describe('what the SQL backends share', () => {
  it('cuts text to a UTF-8 byte budget without splitting a character', () => {
    expect(cutUtf8('short', 64)).toBe('short');
    // "é" is 2 bytes and "€" 3 in UTF-8: a cut inside either steps back to the character before.
    expect(cutUtf8('aé€'.repeat(30), 4)).toBe('aé');
    expect(cutUtf8('aé€'.repeat(30), 5)).toBe('aé');
    expect(cutUtf8('aé€'.repeat(30), 6)).toBe('aé€');
    expect(new TextEncoder().encode(cutUtf8('€'.repeat(50_000))).length).toBeLessThanOrEqual(
      64 * 1024,
    );
  });

  it('says what was stored and what was refused for a conflicting sample', () => {
    const sample = {
      tag: 'kiln/temp',
      t: Date.UTC(2026, 0, 1),
      value: 812.5,
      quality: 192,
      source: 'test',
      receivedAt: 0,
    };
    expect(conflictReason(sample, 810, 192)).toBe(
      'Tag kiln/temp at 1767225600000 (2026-01-01T00:00:00.000Z) already has 810 (quality 192); ' +
        'the new 812.5 (quality 192) was not stored.',
    );
  });

  it('builds a mark from its columns and the tags its backend gathered', () => {
    const mark = markFromRow(
      {
        id: 'm1',
        at: 5,
        label: 'new burner tips',
        note: '',
        direction: 'fall',
        smallest_shift: null,
        n_before: 30,
        n_after_cap: null,
        risk_level: null,
        settling_ms: null,
        created_at: 1,
        updated_at: 2,
        withdrawn_at: null,
        revision: 1,
      },
      ['kiln/fuel', 'kiln/temp'],
    );
    expect(mark).toMatchObject({ id: 'm1', tags: ['kiln/fuel', 'kiln/temp'], nBefore: 30 });
  });

  it('gives the schema steps still to apply in order, and refuses a schema newer than the build', () => {
    const steps = [
      { version: 2, name: 'two', sql: 'B' },
      { version: 1, name: 'one', sql: 'A' },
      { version: 3, name: 'three', sql: 'C' },
    ];
    expect(pendingMigrations(steps, 0, 'The store').map((s) => s.version)).toEqual([1, 2, 3]);
    expect(pendingMigrations(steps, 2, 'The store').map((s) => s.version)).toEqual([3]);
    expect(pendingMigrations(steps, 3, 'The store')).toEqual([]);
    expect(() => pendingMigrations(steps, 4, 'The store')).toThrow(
      'The store has schema version 4; this build knows up to 3. Use a newer trueshift.',
    );
  });
});
