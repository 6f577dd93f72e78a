/** Timers a test fires by hand: nothing runs until the test says so, and time is the test's. */
export interface ManualTimers {
  setTimeout(callback: () => void, ms: number): unknown;
  clearTimeout(handle: unknown): void;
  /** Delays of the timers waiting now, in the order they were set. */
  pending(): number[];
  /** Fires every timer waiting now (not ones they set in turn). */
  fireAll(): number;
}

export function manualTimers(): ManualTimers {
  let next = 1;
  const waiting = new Map<number, { callback: () => void; ms: number }>();
  return {
    setTimeout(callback, ms) {
      const id = next++;
      waiting.set(id, { callback, ms });
      return id;
    },
    clearTimeout(handle) {
      waiting.delete(handle as number);
    },
    pending: () => [...waiting.values()].map((w) => w.ms),
    fireAll() {
      const due = [...waiting.entries()];
      for (const [id] of due) waiting.delete(id);
      for (const [, w] of due) w.callback();
      return due.length;
    },
  };
}
