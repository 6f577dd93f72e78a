export { buildSparkplugIngest } from './sparkplug-ingest.js';
export type {
  SparkplugIngest,
  SparkplugIngestDeps,
  SparkplugIngestEventMap,
  SparkplugIngestOptions,
  SparkplugIngestStats,
} from './sparkplug-ingest.js';
