/**
 * A small least-recently-used cache bounded by its number of entries. A Map keeps its keys in
 * insertion order, so moving a key to the end on every hit leaves the least recently used first,
 * where eviction finds it in O(1).
 */
export interface LruCache<K, V> {
  /** The value, marked as the most recently used; undefined when absent. */
  get(key: K): V | undefined;
  /** Adds or replaces, evicting the least recently used entries beyond the capacity. */
  set(key: K, value: V): void;
  delete(key: K): boolean;
  readonly size: number;
}

export function lruCache<K, V>(capacity: number): LruCache<K, V> {
  if (!(Number.isInteger(capacity) && capacity >= 1)) {
    throw new RangeError(`An LRU cache needs a whole capacity >= 1, got ${String(capacity)}.`);
  }
  const entries = new Map<K, V>();
  return {
    get(key) {
      if (!entries.has(key)) return undefined;
      const value = entries.get(key) as V;
      entries.delete(key);
      entries.set(key, value);
      return value;
    },
    set(key, value) {
      entries.delete(key);
      entries.set(key, value);
      while (entries.size > capacity) {
        const oldest = entries.keys().next();
        if (oldest.done === true) break;
        entries.delete(oldest.value);
      }
    },
    delete(key) {
      return entries.delete(key);
    },
    get size() {
      return entries.size;
    },
  };
}
