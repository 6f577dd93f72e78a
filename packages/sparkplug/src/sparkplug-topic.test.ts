import { describe, expect, it } from 'vitest';
import { parseSparkplugTopic } from './sparkplug-topic.js';

describe('parseSparkplugTopic', () => {
  // Section 4.1: namespace/group_id/message_type/edge_node_id/[device_id]; section 4.1.5: the
  // device_id is there for DBIRTH, DDEATH, DDATA and DCMD and only for them.
  it('reads node, device and STATE topics', () => {
    expect(parseSparkplugTopic('spBv1.0/G/NDATA/E')).toEqual({
      type: 'NDATA',
      group: 'G',
      node: 'E',
      device: null,
    });
    expect(parseSparkplugTopic('spBv1.0/G/DBIRTH/E/D 1')).toEqual({
      type: 'DBIRTH',
      group: 'G',
      node: 'E',
      device: 'D 1',
    });
    // Section 4.2.3: spBv1.0/STATE/sparkplug_host_id.
    expect(parseSparkplugTopic('spBv1.0/STATE/host')).toEqual({ type: 'STATE', hostId: 'host' });
  });

  it('says why a topic is not Sparkplug B', () => {
    const problem = (topic: string): string => {
      const parsed = parseSparkplugTopic(topic);
      return 'problem' in parsed ? parsed.problem : 'parsed';
    };
    expect(problem('spAv1.0/G/NDATA/E')).toMatch(/namespace spBv1\.0/);
    expect(problem('spBv1.0/G/NDATA/E/D')).toMatch(/NDATA topic has 4 levels/);
    expect(problem('spBv1.0/G/DDATA/E')).toMatch(/DDATA topic has 5 levels/);
    expect(problem('spBv1.0/G/XDATA/E')).toMatch(/"XDATA" is not a Sparkplug one/);
    expect(problem('spBv1.0//NDATA/E')).toMatch(/group id is empty/);
    expect(problem('spBv1.0/G/DDATA/E/')).toMatch(/device id is empty/);
    expect(problem('spBv1.0/STATE/')).toMatch(/names no host/);
  });
});
