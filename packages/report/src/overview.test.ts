import { describe, expect, it } from 'vitest';
import { overviewRows } from './overview.js';
import type { OverviewAlertIn, OverviewMarkIn, OverviewTagIn } from './overview.js';

const tag = (name: string): OverviewTagIn => ({
  name,
  unit: null,
  description: null,
  riskLevel: 0.05,
  lastSample: { t: 1000, value: 1 },
});

const mark = (id: string, tags: string[], at: number, withdrawnAt: number | null = null) =>
  ({ id, at, label: `change ${id}`, tags, withdrawnAt }) satisfies OverviewMarkIn;

const alert = (id: number, tagName: string, kind: string, state: string): OverviewAlertIn => ({
  id,
  tag: tagName,
  kind,
  state,
  title: `${kind} on ${tagName}`,
});

describe('overviewRows', () => {
  it('gives each tag one state, the most urgent reason first', () => {
    const rows = overviewRows({
      tags: ['a', 'b', 'c', 'd', 'e', 'f'].map(tag),
      marks: [mark('m1', ['b', 'c'], 10), mark('m2', ['d'], 20), mark('m3', ['e'], 30)],
      alerts: [
        // A data problem outranks the credible shift's open alert on the same tag.
        alert(1, 'a', 'stale', 'acknowledged'),
        alert(2, 'a', 'credible-shift', 'open'),
        alert(3, 'b', 'credible-shift', 'open'),
        // Acknowledged and cleared shift alerts leave the evidence to speak.
        alert(4, 'c', 'credible-shift', 'acknowledged'),
        alert(5, 'e', 'unmarked-shift', 'cleared'),
      ],
      evidence: [
        { markId: 'm1', tag: 'b', verdict: 'credible-rise', risk: 0.001, nAfter: 12 },
        { markId: 'm1', tag: 'c', verdict: 'credible-fall', risk: 0.01, nAfter: 9 },
        { markId: 'm2', tag: 'd', verdict: 'still-gathering', risk: 0.2, nAfter: 3 },
        { markId: 'm3', tag: 'e', verdict: 'no-credible-shift', risk: 0.6, nAfter: 40 },
      ],
    });
    expect(rows.map((r) => [r.name, r.state, r.stateText])).toEqual([
      ['a', 'data-problem', 'Data problem'],
      ['b', 'alert-open', 'Alert open'],
      ['c', 'credible-shift', 'Credible shift'],
      ['d', 'gathering', 'Gathering evidence'],
      ['e', 'watching', 'Watching'],
      ['f', 'watching', 'Watching'],
    ]);
    const byName = new Map(rows.map((r) => [r.name, r]));
    expect(byName.get('a')?.detail).toBe('stale on a');
    expect(byName.get('a')?.alerts.map((x) => x.id)).toEqual([1, 2]);
    expect(byName.get('c')?.detail).toBe('Credible fall after “change m1” (risk 1%).');
    expect(byName.get('d')?.detail).toBe('3 samples after “change m2” so far (risk 20%).');
    expect(byName.get('e')?.alerts).toEqual([]);
    expect(byName.get('f')?.mark).toBeNull();
  });

  it('judges a tag by its newest live mark, and waits for a mark with no evidence yet', () => {
    const rows = overviewRows({
      tags: [tag('x'), tag('y')],
      marks: [mark('old', ['x'], 10), mark('new', ['x'], 50), mark('gone', ['y'], 60, 70)],
      alerts: [],
      evidence: [{ markId: 'old', tag: 'x', verdict: 'credible-rise', risk: 0, nAfter: 30 }],
    });
    const x = rows.find((r) => r.name === 'x');
    expect(x).toMatchObject({ state: 'gathering', mark: { id: 'new' }, verdict: null });
    expect(x?.detail).toBe('Waiting for the first sample after “change new”.');
    // A withdrawn mark asks nothing any more.
    expect(rows.find((r) => r.name === 'y')).toMatchObject({ state: 'watching', mark: null });
  });
});
