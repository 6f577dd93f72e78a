export { buildMqttIngest } from './mqtt-ingest.js';
export type {
  MqttIngest,
  MqttIngestCounters,
  MqttIngestDeps,
  MqttIngestHealth,
  MqttIngestOptions,
  MqttTlsOptions,
} from './mqtt-ingest.js';
export { startEmbeddedBroker } from './embedded-broker.js';
export type { EmbeddedBroker, EmbeddedBrokerOptions } from './embedded-broker.js';
export { hashFile, importCsvFile } from './csv-import.js';
export type {
  CsvImportDeps,
  CsvImportOptions,
  CsvImportProgress,
  CsvImportResult,
  CsvRejectedLine,
} from './csv-import.js';
export { buildDropFolder, PROCESSED_DIR, PROCESSING_DIR, REJECTED_DIR } from './drop-folder.js';
export type {
  DropFolder,
  DropFolderDeps,
  DropFolderHealth,
  DropFolderOptions,
} from './drop-folder.js';
export { registerHttpIngest, SAMPLES_ROUTE } from './http-ingest.js';
export type {
  HttpIngestDeps,
  HttpIngestOptions,
  HttpIngestResult,
  HttpRejection,
} from './http-ingest.js';
export { createValidRanges } from './valid-ranges.js';
export type { ValidRange, ValidRanges } from './valid-ranges.js';
