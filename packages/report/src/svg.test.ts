import { describe, expect, it } from 'vitest';
import { niceTicks, referenceSvg, renderPlot, timeTicks } from './svg.js';
import { referenceFigure } from './figures.js';
import type { Figures } from './figures.js';

function withReference(reference: Figures['reference']): Figures {
  // Only the fields the reference plot reads.
  return { reference, tag: { name: 't', unit: 'kg', description: null } } as unknown as Figures;
}

describe('inline SVG plots', () => {
  it('picks round ticks, whole ones for counts', () => {
    expect(niceTicks(0, 10, 5)).toEqual([0, 2, 4, 6, 8, 10]);
    expect(niceTicks(-0.18, 0.04, 6)).toEqual([-0.15, -0.1, -0.05, 0]);
    expect(niceTicks(0, 6, 5, true)).toEqual([0, 2, 4, 6]);
    expect(niceTicks(0, 3, 8, true)).toEqual([0, 1, 2, 3]);
    const hour = 3_600_000;
    expect(timeTicks(0, 12 * hour, 6)).toEqual([0, 3, 6, 9, 12].map((h) => h * hour));
  });

  it('draws one circle per historical difference, the ones beyond the line apart', () => {
    const differences = Array.from({ length: 250 }, (_, i) => Math.sin(i) * 0.3);
    const svg = referenceSvg(withReference(referenceFigure(differences, 0.25, 'rise', 0.05)));
    const beyond = differences.filter((d) => d >= 0.25).length;
    expect(svg.match(/<circle class="diff"/g)).toHaveLength(250 - beyond);
    expect(svg.match(/<circle class="diff beyond"/g)).toHaveLength(beyond);
    expect(svg).toContain('class="observed-line"');
    expect(svg).toContain(`${beyond} of 250 historical differences`);
  });

  it('draws bins that add up to every difference when there are too many for dots', () => {
    const differences = Array.from({ length: 5000 }, (_, i) => Math.sin(i * 1.7));
    const svg = referenceSvg(withReference(referenceFigure(differences, 0.9, 'either', 0.05)));
    const counts = [...svg.matchAll(/<rect class="bin" data-count="(\d+)"/g)].map((m) =>
      Number(m[1]),
    );
    expect(counts.reduce((a, b) => a + b, 0)).toBe(5000);
    expect(svg).not.toContain('<circle');
  });

  it('escapes every text it is given and names the figure for screen readers', () => {
    const svg = renderPlot({
      id: 'fig-x',
      title: 'A <b>bold</b> title',
      description: 'Says "what" & why',
      x: { label: '<x>', min: 0, max: 1 },
      y: { label: 'y', min: 0, max: 1 },
      layers: [{ kind: 'vline', x: 0.5, color: '#000', label: '</text><script>', className: 'v' }],
      legend: [{ label: '<legend>', color: '#000', swatch: 'line' }],
    });
    expect(svg).not.toMatch(/<b>|<script>|<x>|<legend>|<\/text><script/);
    expect(svg).toContain('<title id="fig-x-title">A &lt;b&gt;bold&lt;/b&gt; title</title>');
    expect(svg).toContain('role="img" aria-labelledby="fig-x-title fig-x-desc"');
  });
});
