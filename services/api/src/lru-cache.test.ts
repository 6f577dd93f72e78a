import { describe, expect, it } from 'vitest';
import { lruCache } from './lru-cache.js';

describe('lruCache', () => {
  it('gives back what was set, and nothing for a key never set', () => {
    const cache = lruCache<string, number>(2);
    cache.set('a', 1);
    expect(cache.get('a')).toBe(1);
    expect(cache.get('b')).toBeUndefined();
    expect(cache.size).toBe(1);
  });

  it('evicts the least recently used entry beyond its capacity', () => {
    const cache = lruCache<string, number>(2);
    cache.set('a', 1);
    cache.set('b', 2);
    // Reading a makes b the least recently used.
    expect(cache.get('a')).toBe(1);
    cache.set('c', 3);
    expect(cache.get('b')).toBeUndefined();
    expect(cache.get('a')).toBe(1);
    expect(cache.get('c')).toBe(3);
    expect(cache.size).toBe(2);
  });

  it('replacing a value refreshes its entry instead of adding one', () => {
    const cache = lruCache<string, number>(2);
    cache.set('a', 1);
    cache.set('b', 2);
    cache.set('a', 10);
    cache.set('c', 3);
    expect(cache.size).toBe(2);
    expect(cache.get('a')).toBe(10);
    expect(cache.get('b')).toBeUndefined();
  });

  it('deletes on request, an entry holding undefined included', () => {
    const cache = lruCache<string, number | undefined>(3);
    cache.set('u', undefined);
    expect(cache.size).toBe(1);
    expect(cache.delete('u')).toBe(true);
    expect(cache.delete('u')).toBe(false);
    expect(cache.size).toBe(0);
  });

  it('holds at most its capacity under many distinct keys', () => {
    const cache = lruCache<number, number>(16);
    for (let i = 0; i < 1000; i++) cache.set(i, i * i);
    expect(cache.size).toBe(16);
    for (let i = 984; i < 1000; i++) expect(cache.get(i)).toBe(i * i);
    expect(cache.get(983)).toBeUndefined();
  });

  it('refuses a capacity that is not a whole number of at least 1', () => {
    expect(() => lruCache(0)).toThrow(RangeError);
    expect(() => lruCache(2.5)).toThrow(RangeError);
  });
});
