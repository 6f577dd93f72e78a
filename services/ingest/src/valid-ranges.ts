import type { Store } from '@trueshift/store';

export interface ValidRange {
  min: number | null;
  max: number | null;
}

/**
 * The tags' valid ranges, kept in memory because the parsers ask for them synchronously once per
 * sample. Tags change rarely (a person edits them), so a copy at most `maxAgeMs` old is good enough.
 */
export interface ValidRanges {
  lookup: (tag: string) => ValidRange | undefined;
  /** Reloads from the store when the copy is older than maxAgeMs (or always, with force). */
  refresh(force?: boolean): Promise<void>;
}

export function createValidRanges(
  store: Store,
  clock: () => number,
  maxAgeMs: number,
): ValidRanges {
  let ranges = new Map<string, ValidRange>();
  let loadedAt = Number.NEGATIVE_INFINITY;
  let loading: Promise<void> | null = null;

  const load = async (): Promise<void> => {
    const tags = await store.listTags();
    const next = new Map<string, ValidRange>();
    for (const tag of tags) {
      if (tag.validMin !== null || tag.validMax !== null) {
        next.set(tag.name, { min: tag.validMin, max: tag.validMax });
      }
    }
    ranges = next;
    loadedAt = clock();
  };

  return {
    lookup: (tag) => ranges.get(tag),
    refresh(force = false) {
      if (!force && clock() - loadedAt < maxAgeMs) return Promise.resolve();
      // Callers arriving while a load runs share it rather than each reading every tag again.
      loading ??= load().finally(() => {
        loading = null;
      });
      return loading;
    },
  };
}
