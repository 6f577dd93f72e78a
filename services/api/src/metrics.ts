import type { Store } from '@trueshift/store';
import type { ComponentHealth } from './health.js';

interface Metric {
  name: string;
  help: string;
  type: 'counter' | 'gauge';
  samples: { labels?: Record<string, string>; value: number }[];
}

function escapeLabel(value: string): string {
  return value.replace(/\\/g, '\\\\').replace(/\n/g, '\\n').replace(/"/g, '\\"');
}

function formatValue(value: number): string {
  if (Number.isNaN(value)) return 'NaN';
  if (value === Infinity) return '+Inf';
  if (value === -Infinity) return '-Inf';
  return String(value);
}

/** The Prometheus text exposition format, version 0.0.4. */
export function exposition(metrics: readonly Metric[]): string {
  const lines: string[] = [];
  for (const metric of metrics) {
    lines.push(`# HELP ${metric.name} ${metric.help.replace(/\\/g, '\\\\').replace(/\n/g, '\\n')}`);
    lines.push(`# TYPE ${metric.name} ${metric.type}`);
    for (const sample of metric.samples) {
      const labels = Object.entries(sample.labels ?? {});
      const text =
        labels.length === 0
          ? ''
          : `{${labels.map(([k, v]) => `${k}="${escapeLabel(v)}"`).join(',')}}`;
      lines.push(`${metric.name}${text} ${formatValue(sample.value)}`);
    }
  }
  return `${lines.join('\n')}\n`;
}

export async function collectMetrics(
  store: Store,
  health: ComponentHealth,
  streamClients: number,
): Promise<string> {
  const [lastSeq, quarantined, open, acknowledged, outbox] = await Promise.all([
    store.lastSeq(),
    store.countQuarantine(),
    store.listAlerts({ state: 'open' }),
    store.listAlerts({ state: 'acknowledged' }),
    store.countOutbox(),
  ]);
  const metrics: Metric[] = [
    {
      name: 'trueshift_samples_ingested_total',
      // Every stored sample takes the next sequence number and none is ever deleted.
      help: 'Samples stored since the store was created.',
      type: 'counter',
      samples: [{ value: lastSeq }],
    },
    {
      name: 'trueshift_quarantined_total',
      help: 'Inputs refused and kept in the quarantine with their reason.',
      type: 'counter',
      samples: [{ value: quarantined }],
    },
    {
      name: 'trueshift_alerts',
      help: 'Alerts not yet cleared, by state.',
      type: 'gauge',
      samples: [
        { labels: { state: 'open' }, value: open.length },
        { labels: { state: 'acknowledged' }, value: acknowledged.length },
      ],
    },
    {
      name: 'trueshift_outbox_entries',
      help: 'Alert deliveries by state: pending ones wait for a (re)try, dead ones were given up.',
      type: 'gauge',
      samples: [
        { labels: { state: 'pending' }, value: outbox.pending },
        { labels: { state: 'dead' }, value: outbox.dead },
        { labels: { state: 'delivered' }, value: outbox.delivered },
      ],
    },
    {
      name: 'trueshift_event_stream_clients',
      help: 'Clients connected to the event stream.',
      type: 'gauge',
      samples: [{ value: streamClients }],
    },
  ];
  if (health.analyser !== undefined) {
    metrics.push({
      name: 'trueshift_analyser_lag_samples',
      help: 'Stored samples the analyser has not analysed yet.',
      type: 'gauge',
      samples: [{ value: health.analyser.lag }],
    });
  }
  if (health.ingest !== undefined) {
    metrics.push({
      name: 'trueshift_ingest_connected',
      help: '1 while the ingest is connected to its broker.',
      type: 'gauge',
      samples: [{ value: health.ingest.connected ? 1 : 0 }],
    });
  }
  return exposition(metrics);
}
