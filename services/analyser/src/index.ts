export { buildAnalyser } from './analyser.js';
export type {
  Analyser,
  AnalyserDeps,
  AnalyserEvents,
  AnalyserOptions,
  CycleReport,
  EvidenceUpdate,
} from './analyser.js';
