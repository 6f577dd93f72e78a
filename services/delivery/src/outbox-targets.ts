import type { ResolvedConfig } from '@trueshift/config';
import type { OutboxInput } from '@trueshift/store';

export type OutboxTarget = Omit<OutboxInput, 'payload' | 'idempotencyKey'>;

/**
 * Where every alert change goes: each configured webhook and the MQTT alert topic. Whoever changes
 * an alert (the analyser, the API) passes these to the store, which queues them in the same
 * transaction as the change.
 */
export function outboxTargets(
  config: Pick<ResolvedConfig, 'webhooks'> & { mqtt: Pick<ResolvedConfig['mqtt'], 'alertTopic'> },
  now: number,
): OutboxTarget[] {
  return [
    ...config.webhooks.map((hook) => ({
      channel: 'webhook' as const,
      target: hook.url,
      createdAt: now,
    })),
    { channel: 'mqtt', target: config.mqtt.alertTopic, createdAt: now },
  ];
}
