export { buildCluster } from './cluster.js';
export type {
  Cluster,
  ClusterDeps,
  ClusterEvents,
  ClusterOptions,
  ClusterTimers,
  MarkChange,
} from './cluster.js';
