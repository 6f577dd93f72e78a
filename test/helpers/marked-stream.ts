/**
 * What the whole-service fault tests share: tags with an in-control history and one mark on them,
 * seeded before the service starts, and a steady QoS 1 stream of samples for a fault to land in.
 */
import { setTimeout as sleep } from 'node:timers/promises';
import type { MqttClient } from 'mqtt';
import type { seededRandom } from '@trueshift/stats';
import type { MarkRecord, Store } from '@trueshift/store';

export interface Published {
  tag: string;
  t: number;
  value: number;
}

/**
 * Batch tags with `history` samples at `level` ± `noise` (one `step` apart from `start`), and one
 * rising mark on all of them right after the history; watched at a long ARL so only the mark speaks.
 */
export async function seedMarkedTags(
  store: Store,
  options: {
    tags: readonly string[];
    start: number;
    step: number;
    history: number;
    level: number;
    noise: number;
    rng: ReturnType<typeof seededRandom>;
    label: string;
  },
): Promise<MarkRecord> {
  const { tags, start, step, history, level, noise, rng } = options;
  for (const name of tags) {
    await store.upsertTag({ name, settings: { kind: 'batch', inControlArl: 1e7 } }, Date.now());
    await store.writeSamples(
      Array.from({ length: history }, (_, i) => ({
        tag: name,
        t: start + i * step,
        value: level + noise * rng.normal(),
        quality: 192,
        source: 'test:history',
        receivedAt: Date.now(),
      })),
    );
  }
  return store.createMark(
    { tags: [...tags], at: start + history * step, label: options.label, direction: 'rise' },
    'test',
    Date.now(),
  );
}

/**
 * Publishes the samples at QoS 1 on trueshift/samples/<tag>, `chunk` at a time with a pause between:
 * a steady stream rather than one burst, so a fault lands in the middle of it. `onProgress` hears
 * how many were acknowledged by the broker so far.
 */
export async function publishSteadily(
  client: MqttClient,
  messages: readonly Published[],
  options: { chunk: number; pauseMs: number; onProgress?: (published: number) => void },
): Promise<void> {
  for (let i = 0; i < messages.length; i += options.chunk) {
    await Promise.all(
      messages
        .slice(i, i + options.chunk)
        .map((m) =>
          client.publishAsync(
            `trueshift/samples/${m.tag}`,
            JSON.stringify({ value: m.value, time: m.t }),
            { qos: 1 },
          ),
        ),
    );
    options.onProgress?.(Math.min(messages.length, i + options.chunk));
    await sleep(options.pauseMs);
  }
}
