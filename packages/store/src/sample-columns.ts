import type { SampleColumns } from './types.js';

/**
 * One tag's samples gathered page by page into growable columns, as the SQL backends read long
 * histories: capacity doubles, so 10^6 samples cost about twenty copies, not one per page.
 */
export class SampleColumnsBuilder {
  private t = new Float64Array(1024);
  private value = new Float64Array(1024);
  private quality = new Int32Array(1024);
  length = 0;

  /** Makes room for `n` more samples and gives the index the first of them goes to. */
  reserve(n: number): number {
    const needed = this.length + n;
    if (needed > this.t.length) {
      let capacity = this.t.length * 2;
      while (capacity < needed) capacity *= 2;
      this.t = grown(this.t, new Float64Array(capacity));
      this.value = grown(this.value, new Float64Array(capacity));
      this.quality = grown(this.quality, new Int32Array(capacity));
    }
    const at = this.length;
    this.length = needed;
    return at;
  }

  /** Fills a reserved place; NaN is a sample without a value. */
  set(index: number, t: number, value: number, quality: number): void {
    this.t[index] = t;
    this.value[index] = value;
    this.quality[index] = quality;
  }

  lastTime(): number {
    return this.t[this.length - 1] ?? Number.NaN;
  }

  /** The columns gathered, oldest first; `reverse` for pages that were read newest first. */
  finish(reverse: boolean): SampleColumns {
    const columns = {
      t: this.t.slice(0, this.length),
      value: this.value.slice(0, this.length),
      quality: this.quality.slice(0, this.length),
    };
    if (reverse) {
      columns.t.reverse();
      columns.value.reverse();
      columns.quality.reverse();
    }
    return columns;
  }
}

function grown<T extends Float64Array | Int32Array>(from: T, to: T): T {
  to.set(from);
  return to;
}
