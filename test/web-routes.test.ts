/**
 * The page's routes over real HTTP, without a browser: what is served to whom, and what is not.
 */
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { CAUTION } from '@trueshift/config';
import { ENERGY, MOISTURE, STEAM, startWebPlant } from './helpers/web-plant.js';
import type { WebPlant } from './helpers/web-plant.js';

describe('the page routes', () => {
  let plant: WebPlant;
  beforeAll(async () => {
    plant = await startWebPlant();
  }, 60_000);
  afterAll(async () => {
    await plant.close();
  });

  const get = (path: string, scope?: 'read' | 'write' | 'admin'): Promise<Response> =>
    fetch(`${plant.base}${path}`, { headers: scope === undefined ? {} : plant.api.as(scope) });

  it('serves the page to anyone, with a policy that keeps it to its own origin', async () => {
    for (const path of ['/', `/tags/${encodeURIComponent(STEAM)}`]) {
      const response = await get(path);
      expect(response.status).toBe(200);
      expect(response.headers.get('content-type')).toBe('text/html; charset=utf-8');
      expect(response.headers.get('content-security-policy')).toContain("script-src 'self'");
      const html = await response.text();
      expect(html).toContain(CAUTION);
      expect(html).toContain('<script type="module" src="/assets/app.js"></script>');
    }
  });

  it('serves its own modules and the plotting library, and nothing else from disk', async () => {
    const app = await get('/assets/app.js');
    expect(app.status).toBe(200);
    expect(app.headers.get('content-type')).toBe('text/javascript; charset=utf-8');
    const plot = await get('/assets/vendor/uplot.js');
    expect(plot.status).toBe(200);
    expect(await plot.text()).toContain('uPlot');
    expect((await get('/assets/vendor/uplot.css')).headers.get('content-type')).toBe(
      'text/css; charset=utf-8',
    );
    for (const path of [
      '/assets/nothing.js',
      '/assets/..%2Fpackage.json',
      '/assets/vendor/..%2F..%2Fpackage.json',
      '/assets/vendor/uPlot.cjs.js',
    ]) {
      const response = await get(path);
      expect(response.status).toBe(404);
      expect(await response.json()).toMatchObject({ code: 'NOT_FOUND' });
    }
  });

  it("gives every tag's state to a reader, and to nobody without a token", async () => {
    expect((await get('/api/v1/overview')).status).toBe(401);
    const response = await get('/api/v1/overview', 'read');
    expect(response.status).toBe(200);
    const body = (await response.json()) as {
      caution: string;
      tags: { name: string; state: string; riskLevel: number; unit: string | null }[];
    };
    expect(body.caution).toBe(CAUTION);
    expect(body.tags.map((t) => t.name)).toHaveLength(4);
    expect(body.tags.find((t) => t.name === ENERGY)).toMatchObject({
      state: 'gathering',
      riskLevel: 0.05,
      unit: 'GJ/t',
    });
  });

  it('answers a report that cannot be made with the reason from the catalogue', async () => {
    const unknown = await get(
      `/api/v1/marks/no-such-mark/report/${encodeURIComponent(STEAM)}`,
      'read',
    );
    expect(unknown.status).toBe(404);
    expect(await unknown.json()).toMatchObject({ code: 'MARK_NOT_FOUND' });
    const other = await get(
      `/api/v1/marks/${plant.marks.steamTrap}/report/${encodeURIComponent(MOISTURE)}`,
      'read',
    );
    expect(other.status).toBe(404);
    expect(await other.json()).toMatchObject({ code: 'EVIDENCE_NOT_FOUND' });
    const format = await get(
      `/api/v1/marks/${plant.marks.steamTrap}/report/${encodeURIComponent(STEAM)}?format=pdf`,
      'read',
    );
    expect(format.status).toBe(400);
    const json = await get(
      `/api/v1/marks/${plant.marks.steamTrap}/report/${encodeURIComponent(STEAM)}?format=json`,
      'read',
    );
    expect(await json.json()).toMatchObject({
      caution: CAUTION,
      figures: { verdict: 'credible-fall', mark: { label: 'New steam trap' } },
    });
  });

  it('documents its API routes in the OpenAPI document, and not the page files', async () => {
    const doc = (await (await get('/api/v1/openapi.json')).json()) as {
      paths: Record<string, unknown>;
    };
    expect(Object.keys(doc.paths)).toEqual(
      expect.arrayContaining(['/api/v1/overview', '/api/v1/marks/{id}/report/{tag}']),
    );
    expect(Object.keys(doc.paths).filter((p) => p.startsWith('/assets'))).toEqual([]);
  });
});
