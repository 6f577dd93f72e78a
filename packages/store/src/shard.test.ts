import { describe, expect, it } from 'vitest';
import { fairShare, shardOf } from './shard.js';

describe('shardOf', () => {
  it('is FNV-1a 32-bit modulo the shard count', () => {
    // FNV-1a 32-bit test vectors of the algorithm's authors (Fowler, Noll, Vo), from memory:
    // "" -> 0x811c9dc5, "a" -> 0xe40c292c, "foobar" -> 0xbf9cf968.
    expect(shardOf('', 2 ** 31)).toBe(0x811c9dc5 % 2 ** 31);
    expect(shardOf('a', 2 ** 31)).toBe(0xe40c292c % 2 ** 31);
    expect(shardOf('foobar', 2 ** 31)).toBe(0xbf9cf968 % 2 ** 31);
  });

  it('puts everything in shard 0 of 1 and spreads many tags evenly over 16', () => {
    expect(shardOf('line3/kiln/temp', 1)).toBe(0);
    const counts = new Array<number>(16).fill(0);
    for (let i = 0; i < 16_000; i++) {
      const s = shardOf(`site${i % 7}/unit${i}/pv`, 16);
      counts[s] = (counts[s] ?? 0) + 1;
    }
    for (const n of counts) expect(n).toBeGreaterThan(800);
    for (const n of counts) expect(n).toBeLessThan(1200);
  });

  it('refuses a shard count that is not a whole number >= 1', () => {
    expect(() => shardOf('x', 0)).toThrow(RangeError);
    expect(() => shardOf('x', 1.5)).toThrow(RangeError);
  });
});

describe('fairShare', () => {
  it('gives every instance an equal share, the remainder to the first by name, summing to all', () => {
    const alive = ['node-c', 'node-a', 'node-b'];
    const shares = alive.map((me) => fairShare(32, alive, me));
    expect(shares).toEqual([10, 11, 11]);
    expect(shares.reduce((a, b) => a + b, 0)).toBe(32);
  });

  it('counts this instance even before its heartbeat is seen, and gives a lone instance all', () => {
    expect(fairShare(8, [], 'solo')).toBe(8);
    expect(fairShare(8, ['other'], 'solo')).toBe(4);
    expect(fairShare(2, ['a', 'b', 'c'], 'c')).toBe(0);
  });
});
