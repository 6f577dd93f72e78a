import { computeEvidence, seededRandom, windowDifferences } from '@trueshift/stats';
import { describe, expect, it } from 'vitest';
import { buildDecisionReport } from './decision-report.js';
import { buildFigures } from './figures.js';
import type { Figures } from './figures.js';

const HOUR = 3_600_000;
const AT = Date.UTC(2026, 2, 3, 8);
const CAUTION = 'Caution: numbers are not a hazard study.';

function figures(label: string): Figures {
  const rng = seededRandom(42);
  const history = Float64Array.from({ length: 240 }, () => 55 + rng.normal());
  const after = Float64Array.from({ length: 10 }, () => 56.5 + rng.normal());
  const evidence = computeEvidence({ history, after, direction: 'rise', riskLevel: 0.05 });
  return buildFigures(
    {
      tag: { name: 'boiler/efficiency', unit: '%', description: 'Boiler <efficiency>' },
      mark: { id: 'mark-1', at: AT, label, note: 'Burner tips cleaned & reset', direction: 'rise' },
      basis: 'batch',
      snapshot: {
        sampleTime: AT + 9 * HOUR,
        evaluatedAt: AT + 10 * HOUR,
        nAfter: 10,
        risk: evidence.reference.status === 'ok' ? evidence.reference.risk : null,
        verdict: evidence.verdict,
        body: JSON.parse(JSON.stringify({ evidence })) as unknown,
      },
      run: {
        t: [
          ...Array.from(history, (_, i) => AT - (240 - i) * HOUR),
          ...Array.from(after, (_, i) => AT + i * HOUR),
        ],
        value: [...history, ...after],
        total: 250,
        thinned: false,
      },
      history,
      beforeStart: AT - evidence.nBefore * HOUR,
      after: { t: Array.from(after, (_, i) => AT + i * HOUR), value: after },
      path: [
        {
          evaluatedAt: 1,
          sampleTime: 1,
          nAfter: 10,
          risk: evidence.reference.status === 'ok' ? evidence.reference.risk : null,
          verdict: evidence.verdict,
        },
      ],
      smallestShift: null,
    },
    windowDifferences(history, evidence.nBefore, 10),
  );
}

describe('buildDecisionReport', () => {
  const f = figures('Burner <retune> "B"');
  const html = buildDecisionReport(f, { caution: CAUTION, generatedAt: AT + 11 * HOUR });

  it('is one file that needs nothing else: no script, no link, no address', () => {
    expect(html.startsWith('<!doctype html>')).toBe(true);
    expect(html).not.toMatch(/<script|<link|<img|<iframe|\ssrc=|\shref=|https?:\/\/|url\((?!#)/i);
    expect(html).toContain('<style>');
    expect(html).toContain('@media print');
  });

  it('carries the caution at the top and at the end', () => {
    expect(html.split(CAUTION)).toHaveLength(3);
    expect(html.indexOf(CAUTION)).toBeLessThan(html.indexOf('The question'));
  });

  it('asks the question, answers it, and shows the window, the pictures and the numbers', () => {
    for (const heading of [
      'The question',
      'The answer',
      'The data',
      'The pictures',
      'The numbers',
      'How the evidence is weighed',
      'What this report does not tell you',
    ]) {
      expect(html).toContain(`<h2>${heading}</h2>`);
    }
    expect(html).toContain(f.verdictTitle);
    for (const id of ['run', 'reference', 'risk-path', 'comparison', 'cusum', 'ewma']) {
      expect(html).toContain(`<svg id="fig-${id}"`);
    }
    expect(html.match(/<circle class="diff/g)).toHaveLength(f.window.m);
    expect(html).toContain(`${f.window.m} (each an after-window mean less its before-window mean)`);
    expect(html.match(/<strong>It assumes:<\/strong>/g)).toHaveLength(5);
    expect(html).toContain('Samples are independent of one another.');
  });

  it('escapes what people typed: labels, notes and descriptions', () => {
    expect(html).not.toContain('<retune>');
    expect(html).not.toContain('<efficiency>');
    expect(html).toContain('Burner &lt;retune&gt; &quot;B&quot;');
    expect(html).toContain('Burner tips cleaned &amp; reset');
  });
});
