/** The Sparkplug B topic namespace (Sparkplug 3.0, section 4.1.1, tck-id-topic-structure-namespace-a). */
export const SPARKPLUG_NAMESPACE = 'spBv1.0';

export type SparkplugNodeMessageType = 'NBIRTH' | 'NDEATH' | 'NDATA' | 'NCMD';
export type SparkplugDeviceMessageType = 'DBIRTH' | 'DDEATH' | 'DDATA' | 'DCMD';

/** A topic read as Sparkplug: namespace/group_id/message_type/edge_node_id/[device_id] (section 4.1). */
export type SparkplugTopic =
  | { type: SparkplugNodeMessageType; group: string; node: string; device: null }
  | { type: SparkplugDeviceMessageType; group: string; node: string; device: string }
  | { type: 'STATE'; hostId: string };

const NODE_TYPES = new Set<string>(['NBIRTH', 'NDEATH', 'NDATA', 'NCMD']);
const DEVICE_TYPES = new Set<string>(['DBIRTH', 'DDEATH', 'DDATA', 'DCMD']);

/** Why a Sparkplug id (group, edge node, device) cannot be one, or null (section 4.1.2, 4.1.4, 4.1.5). */
export function sparkplugIdProblem(kind: string, id: string): string | null {
  if (id === '') return `the ${kind} is empty.`;
  if (/[+/#]/.test(id)) return `the ${kind} ${JSON.stringify(id)} contains "+", "/" or "#".`;
  return null;
}

/** Reads a topic as Sparkplug B, or says why it is not one. */
export function parseSparkplugTopic(topic: string): SparkplugTopic | { problem: string } {
  const levels = topic.split('/');
  if (levels[0] !== SPARKPLUG_NAMESPACE) {
    return { problem: `the topic does not start with the namespace ${SPARKPLUG_NAMESPACE}.` };
  }
  const [, group = '', type = '', node = '', device] = levels;
  // Sparkplug 3.0 section 4.2.3: a Host Application's STATE topic is spBv1.0/STATE/sparkplug_host_id.
  if (group === 'STATE' && levels.length === 3) {
    const hostId = levels[2] ?? '';
    if (hostId === '') return { problem: 'the STATE topic names no host application.' };
    return { type: 'STATE', hostId };
  }
  const isNode = NODE_TYPES.has(type);
  const isDevice = DEVICE_TYPES.has(type);
  if (!isNode && !isDevice) {
    return { problem: `the message type ${JSON.stringify(type)} is not a Sparkplug one.` };
  }
  // Section 4.1.5: the device_id is present exactly for DBIRTH, DDEATH, DDATA and DCMD.
  const wanted = isNode ? 4 : 5;
  if (levels.length !== wanted) {
    return {
      problem: `a ${type} topic has ${wanted} levels (${isNode ? 'namespace/group/type/edge node' : 'namespace/group/type/edge node/device'}), this one ${levels.length}.`,
    };
  }
  for (const [kind, id] of [
    ['group id', group],
    ['edge node id', node],
  ] as const) {
    if (id === '') return { problem: `the ${kind} is empty.` };
  }
  if (isNode) return { type: type as SparkplugNodeMessageType, group, node, device: null };
  if (device === undefined || device === '') return { problem: 'the device id is empty.' };
  return { type: type as SparkplugDeviceMessageType, group, node, device };
}
