/**
 * The shard a tag belongs to: FNV-1a (32 bit) over the name's UTF-16 code units, modulo the
 * shard count. Every instance and every store must agree on it, so it never changes.
 */
export function shardOf(tag: string, shards: number): number {
  if (!(Number.isInteger(shards) && shards >= 1)) {
    throw new RangeError(`shards must be a whole number >= 1, got ${shards}`);
  }
  let hash = 0x811c9dc5;
  for (let i = 0; i < tag.length; i++) {
    hash ^= tag.charCodeAt(i);
    hash = Math.imul(hash, 0x01000193) >>> 0;
  }
  return hash % shards;
}

/**
 * How many of `shards` this instance should hold when the instances in `alive` share them: an
 * equal share each, the remainder going one apiece to the first instances by name. Every instance
 * computes the same split from the same list, so they settle without talking to each other.
 */
export function fairShare(shards: number, alive: readonly string[], me: string): number {
  const members = [...new Set([...alive, me])].sort();
  const base = Math.floor(shards / members.length);
  const extra = shards % members.length;
  return base + (members.indexOf(me) < extra ? 1 : 0);
}
