/**
 * Grow-only working buffers, one per use. On the machines measured, writing 8 MB of fresh memory
 * costs more than the arithmetic done in it (about 30 ms against 3 ms for 10^6 doubles), and a tag's
 * evidence is recomputed with every new sample, so the buffers are kept between calls. The cost is
 * resident memory: one double per history sample per slot, for the largest history seen.
 *
 * A slot's contents are valid only until the next call that asks for the same slot; the calls that
 * use them are synchronous and never hand the buffer out.
 */
export type ScratchSlot = 'prefix-sums' | 'moving-ranges' | 'window-differences';

const buffers = new Map<ScratchSlot, Float64Array>();

export function scratch(slot: ScratchSlot, length: number): Float64Array {
  let buffer = buffers.get(slot);
  if (buffer === undefined || buffer.length < length) {
    // Grow by half again so a history that gains a sample at a time does not reallocate each call.
    buffer = new Float64Array(Math.max(length, Math.ceil((buffer?.length ?? 0) * 1.5)));
    buffers.set(slot, buffer);
  }
  return buffer.subarray(0, length);
}
