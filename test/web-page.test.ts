/**
 * The page in a real browser: Debian's Chromium driven by playwright-core against the real service
 * (API, page, analyser, SQLite) on 127.0.0.1. Screenshots go to test/artifacts/, which CI keeps.
 */
import { existsSync } from 'node:fs';
import { mkdir, mkdtemp, rm, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath, pathToFileURL } from 'node:url';
import { chromium } from 'playwright-core';
import type { BrowserContext, Page } from 'playwright-core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { CAUTION } from '@trueshift/config';
import { escapeHtml } from '@trueshift/report';
import type { Figures } from '@trueshift/report';
import { ENERGY, MOISTURE, PURITY, STEAM, startWebPlant } from './helpers/web-plant.js';
import type { WebPlant } from './helpers/web-plant.js';

/*
 * The test project has no DOM library (it type-checks Node.js code), so the few browser objects
 * the callbacks run inside the page touch are typed here, for this file only.
 */
interface PageElement {
  textContent: string | null;
  getAttribute(name: string): string | null;
  querySelector(selector: string): PageElement | null;
}
interface DrawnPlot {
  data: (number | null | undefined)[][];
  valToPos(value: number, scale: string, canvas?: boolean): number;
  bbox: { left: number; top: number; width: number; height: number };
  ctx: {
    getImageData(x: number, y: number, w: number, h: number): { data: Uint8ClampedArray };
  };
}
declare const document: {
  querySelector(selector: string): unknown;
  documentElement: { scrollWidth: number; clientWidth: number };
};
declare const sessionStorage: { setItem(key: string, value: string): void };

const CHROMIUM = '/usr/bin/chromium';
const ARTIFACTS = fileURLToPath(new URL('./artifacts/', import.meta.url));
const BROWSER_TEST_MS = 120_000;
/** How long a poll waits for the page to catch up: generous, since CI machines are shared. */
const POLL = { timeout: 15_000 };

async function launch(userDataDir: string): Promise<BrowserContext> {
  if (!existsSync(CHROMIUM)) {
    throw new Error(`${CHROMIUM} is missing: install Debian's chromium package (.ci/run does).`);
  }
  return chromium.launchPersistentContext(userDataDir, {
    executablePath: CHROMIUM,
    headless: true,
    args: [
      '--no-sandbox',
      '--disable-gpu',
      '--disable-background-networking',
      '--disable-quic',
      '--no-first-run',
      '--disable-component-update',
      '--disable-sync',
    ],
    viewport: { width: 1280, height: 900 },
    timezoneId: 'UTC',
    locale: 'en-GB',
  });
}

/** The share of a canvas column (or row) whose pixels are near a colour: how we see a drawn line. */
async function lineCoverage(
  page: Page,
  selector: string,
  at: { x?: number; y?: number; from?: number; to?: number },
  rgb: [number, number, number],
): Promise<number> {
  return page.evaluate(
    ({ selector, at, rgb }) => {
      const area = document.querySelector(selector) as { plot?: DrawnPlot } | null;
      const plot = area?.plot;
      if (plot === undefined) return -1;
      const { left, top, width, height } = plot.bbox;
      const near = (data: Uint8ClampedArray, i: number): boolean =>
        Math.abs((data[i] ?? 0) - rgb[0]) < 40 &&
        Math.abs((data[i + 1] ?? 0) - rgb[1]) < 40 &&
        Math.abs((data[i + 2] ?? 0) - rgb[2]) < 40;
      let hits = 0;
      let total = 0;
      if (at.x !== undefined) {
        const px = Math.round(plot.valToPos(at.x, 'x', true));
        // A line is a couple of pixels wide; look at three columns around where it should be.
        for (const dx of [-1, 0, 1]) {
          const column = plot.ctx.getImageData(px + dx, top, 1, height).data;
          let columnHits = 0;
          for (let i = 0; i < column.length; i += 4) if (near(column, i)) columnHits += 1;
          hits = Math.max(hits, columnHits);
        }
        total = height;
      } else if (at.y !== undefined) {
        const py = Math.round(plot.valToPos(at.y, 'y', true));
        const x0 = Math.round(at.from === undefined ? left : plot.valToPos(at.from, 'x', true));
        const x1 = Math.round(at.to === undefined ? left + width : plot.valToPos(at.to, 'x', true));
        for (const dy of [-1, 0, 1]) {
          const row = plot.ctx.getImageData(x0, py + dy, Math.max(1, x1 - x0), 1).data;
          let rowHits = 0;
          for (let i = 0; i < row.length; i += 4) if (near(row, i)) rowHits += 1;
          hits = Math.max(hits, rowHits);
        }
        total = Math.max(1, x1 - x0);
      }
      return hits / total;
    },
    { selector, at, rgb },
  );
}

/** Points uPlot was given in a chart's series (nulls are gaps, not points). */
async function seriesPoints(page: Page, selector: string, series: number[]): Promise<number> {
  return page.evaluate(
    ({ selector, series }) => {
      const area = document.querySelector(selector) as { plot?: DrawnPlot } | null;
      const data = area?.plot?.data;
      if (data === undefined) return -1;
      return series.reduce(
        (sum, s) => sum + (data[s] ?? []).filter((v) => v !== null && v !== undefined).length,
        0,
      );
    },
    { selector, series },
  );
}

const hex = (color: string): [number, number, number] => [
  parseInt(color.slice(1, 3), 16),
  parseInt(color.slice(3, 5), 16),
  parseInt(color.slice(5, 7), 16),
];

describe('the page in Chromium', () => {
  let plant: WebPlant;
  let context: BrowserContext;
  let profile: string;

  beforeAll(async () => {
    await mkdir(ARTIFACTS, { recursive: true });
    plant = await startWebPlant();
    profile = await mkdtemp(join(tmpdir(), 'trueshift-chromium-'));
    context = await launch(profile);
  }, 60_000);

  afterAll(async () => {
    await context.close();
    await plant.close();
    await rm(profile, { recursive: true, force: true });
  });

  async function openWithToken(path: string, scope: 'read' | 'write'): Promise<Page> {
    const page = await context.newPage();
    await page.goto(`${plant.base}/`);
    // The token the user pastes once; the tab keeps it in sessionStorage.
    await page.evaluate((token) => {
      sessionStorage.setItem('trueshift.token', token);
    }, plant.api.tokens[scope]);
    await page.goto(`${plant.base}${path}`);
    return page;
  }

  it(
    'lists every tag with its state in words, sorts and filters, and asks for a token',
    async () => {
      const page = await context.newPage();
      await page.goto(`${plant.base}/`);
      // Reading needs a token with this configuration: the page says so and asks for one.
      await expect.poll(() => page.locator('#notice').textContent(), POLL).toContain('token');
      expect(await page.locator('#token-dialog').evaluate((d: { open: boolean }) => d.open)).toBe(
        true,
      );
      await page.fill('#token-input', plant.api.tokens.read);
      await page.click('#token-dialog button[value="save"]');
      await page.waitForSelector('#tags tbody tr');

      const states = async (): Promise<Record<string, string>> =>
        Object.fromEntries(
          await page.$$eval('#tags tbody tr', (rows: PageElement[]) =>
            rows.map((row) => [
              row.getAttribute('data-tag') ?? '',
              row.querySelector('.state-cell')?.textContent?.trim() ?? '',
            ]),
          ),
        );
      expect(await states()).toEqual({
        [PURITY]: '⚠Data problem',
        [STEAM]: '!Alert open',
        [ENERGY]: '…Gathering evidence',
        [MOISTURE]: '○Watching',
      });
      await expect.poll(() => page.locator('#live').textContent(), POLL).toBe('Live');
      expect(await page.locator('.caution').first().textContent()).toBe(CAUTION);
      await page.screenshot({ path: join(ARTIFACTS, 'web-overview.png'), fullPage: true });

      // Most urgent first by default; by name when asked, and back the other way.
      const order = (): Promise<string[]> =>
        page.$$eval('#tags tbody tr', (rows: PageElement[]) =>
          rows.map((r) => r.getAttribute('data-tag') ?? ''),
        );
      expect(await order()).toEqual([PURITY, STEAM, ENERGY, MOISTURE]);
      await page.click('th button[data-sort="name"]');
      expect(await order()).toEqual([MOISTURE, STEAM, ENERGY, PURITY]);
      expect(await page.getAttribute('th:has(button[data-sort="name"])', 'aria-sort')).toBe(
        'ascending',
      );
      await page.click('th button[data-sort="name"]');
      expect(await order()).toEqual([PURITY, ENERGY, STEAM, MOISTURE]);
      // The headers are buttons: reachable and usable from the keyboard.
      await page.focus('th button[data-sort="state"]');
      await page.keyboard.press('Enter');
      expect(await order()).toEqual([PURITY, STEAM, ENERGY, MOISTURE]);
      expect(await page.getAttribute('th:has(button[data-sort="state"])', 'aria-sort')).toBe(
        'ascending',
      );
      await page.fill('#filter', 'kiln');
      expect(await order()).toEqual([ENERGY]);
      await page.fill('#filter', '');
      await page.selectOption('#state-filter', 'data-problem');
      expect(await order()).toEqual([PURITY]);
      expect(await page.locator('#row-count').textContent()).toBe('1 of 4 tags shown');

      // A tablet held upright.
      await page.selectOption('#state-filter', '');
      await page.setViewportSize({ width: 768, height: 1024 });
      const overflow = await page.evaluate(
        () => document.documentElement.scrollWidth - document.documentElement.clientWidth,
      );
      expect(overflow).toBeLessThanOrEqual(0);
      // The table too fits without scrolling sideways: less urgent columns step aside.
      expect(
        await page
          .locator('.table-wrap')
          .evaluate(
            (d: { scrollWidth: number; clientWidth: number }) => d.scrollWidth - d.clientWidth,
          ),
      ).toBeLessThanOrEqual(0);
      expect(await page.locator('#tags tbody tr').first().locator('.state-cell').isVisible()).toBe(
        true,
      );
      await page.screenshot({ path: join(ARTIFACTS, 'web-overview-tablet.png'), fullPage: true });
      await page.close();
    },
    BROWSER_TEST_MS,
  );

  it(
    "draws a tag's evidence: the mark, the means, one dot per historical difference",
    async () => {
      const page = await openWithToken(`/tags/${encodeURIComponent(STEAM)}`, 'read');
      await page.waitForSelector('#verdict [data-verdict]');
      const figures = (
        (await (
          await fetch(
            `${plant.base}/api/v1/marks/${plant.marks.steamTrap}/report/${encodeURIComponent(STEAM)}?format=json`,
            { headers: plant.api.as('read') },
          )
        ).json()) as { figures: Figures }
      ).figures;
      expect(figures.verdict).toBe('credible-fall');
      const reference = figures.reference;
      if (reference?.kind !== 'dots') throw new Error('expected a dot plot');
      expect(await page.locator('#verdict .title').textContent()).toBe('Credible fall');

      // The dot plot holds exactly M dots, and the page says M in words.
      const m = figures.window.m;
      expect(m).toBe(figures.evidence?.reference.m);
      expect(await seriesPoints(page, '#chart-reference', [1, 2])).toBe(m);
      expect(await seriesPoints(page, '#chart-reference', [2])).toBe(reference.beyond);
      expect(await page.locator('#caption-reference').textContent()).toContain(`M = ${m}`);
      // The observed difference is drawn as a line across the dots.
      expect(
        await lineCoverage(page, '#chart-reference', { x: reference.observed }, hex('#1d2433')),
      ).toBeGreaterThan(0.5);

      // The run chart: the mark as a violet line, the two means as segments in their colours.
      expect(
        await lineCoverage(page, '#chart-run', { x: figures.run.markAt }, hex('#6b3fa0')),
      ).toBeGreaterThan(0.5);
      const before = figures.run.before;
      const after = figures.run.after;
      if (before === null || after === null) throw new Error('expected both means');
      expect(
        await lineCoverage(
          page,
          '#chart-run',
          { y: before.mean, from: before.from, to: before.to },
          hex('#2f6690'),
        ),
      ).toBeGreaterThan(0.4);
      expect(
        await lineCoverage(
          page,
          '#chart-run',
          { y: after.mean, from: after.from, to: after.to },
          hex('#b5541c'),
        ),
      ).toBeGreaterThan(0.4);

      // Every before and after value is a point; the other charts have their series.
      expect(await seriesPoints(page, '#chart-comparison', [1])).toBe(
        figures.comparison.before.length,
      );
      expect(await seriesPoints(page, '#chart-comparison', [2])).toBe(
        figures.comparison.after.length,
      );
      expect(await seriesPoints(page, '#chart-path', [1])).toBe(
        figures.path.risk.filter((r) => r !== null).length,
      );
      expect(await seriesPoints(page, '#chart-cusum', [1])).toBe(figures.evidence?.nAfter);
      expect(
        await lineCoverage(page, '#chart-cusum', { y: figures.cusum?.h ?? 0 }, hex('#a11d33')),
      ).toBeGreaterThan(0.3);
      expect(await seriesPoints(page, '#chart-ewma', [1])).toBe(figures.evidence?.nAfter);

      const table = await page.$$eval('#summary-table tr', (rows: PageElement[]) =>
        rows.map((r) => r.querySelector('th')?.textContent ?? ''),
      );
      for (const row of [
        'Before the change',
        'After the change',
        'Observed shift',
        'Reference risk',
        "Welch's t test",
        'Autocorrelation',
        'Samples still needed',
      ]) {
        expect(table).toContain(row);
      }
      await page.screenshot({ path: join(ARTIFACTS, 'web-tag-view.png'), fullPage: true });
      await page.setViewportSize({ width: 768, height: 1024 });
      await page.waitForTimeout(200);
      const overflow = await page.evaluate(
        () => document.documentElement.scrollWidth - document.documentElement.clientWidth,
      );
      expect(overflow).toBeLessThanOrEqual(0);
      await page.screenshot({ path: join(ARTIFACTS, 'web-tag-view-tablet.png'), fullPage: true });
      await page.close();
    },
    BROWSER_TEST_MS,
  );

  it(
    'acknowledges an alert from the tag view, and the overview follows live',
    async () => {
      const overview = await openWithToken('/', 'read');
      await overview.waitForSelector(`#tags tbody tr[data-tag="${STEAM}"]`);
      const steamState = (): Promise<string | null> =>
        overview.locator(`#tags tbody tr[data-tag="${STEAM}"] .state-cell`).textContent();
      expect(await steamState()).toBe('!Alert open');
      await expect.poll(() => overview.locator('#live').textContent(), POLL).toBe('Live');

      const page = await openWithToken(`/tags/${encodeURIComponent(STEAM)}`, 'write');
      const open = await plant.api.store.listAlerts({ tag: STEAM, state: 'open' });
      expect(open.map((a) => a.kind)).toEqual(['credible-shift']);
      const alert = open[0];
      if (alert === undefined) throw new Error('no open alert');
      const item = page.locator(`#alerts li[data-alert="${alert.id}"]`);
      await item.locator('button.acknowledge').click();
      // A note is asked for first; nothing is sent without one.
      await expect
        .poll(() => page.locator('#notice').textContent())
        .toContain('Say in a few words');
      expect((await plant.api.store.getAlert(alert.id))?.state).toBe('open');
      await item.locator('input').fill('Trap change confirmed by the shift engineer');
      await item.locator('button.acknowledge').click();
      await expect
        .poll(() => page.locator(`#alerts li[data-alert="${alert.id}"]`).getAttribute('data-state'))
        .toBe('acknowledged');
      expect(await plant.api.store.getAlert(alert.id)).toMatchObject({
        state: 'acknowledged',
        acknowledgedBy: 'token:writer',
        note: 'Trap change confirmed by the shift engineer',
      });
      // The overview was not reloaded: the event stream told it.
      await expect.poll(steamState, POLL).toBe('◆Credible shift');
      await overview.close();
      await page.close();
    },
    BROWSER_TEST_MS,
  );

  it(
    'marks a change from the page, and its evidence appears',
    async () => {
      const page = await openWithToken(`/tags/${encodeURIComponent(MOISTURE)}`, 'write');
      await page.waitForSelector('#mark-form');
      await expect
        .poll(() => page.locator('#verdict').textContent())
        .toContain('No change is marked');
      // No evidence yet: the run chart still shows the samples, without a mark.
      expect(await seriesPoints(page, '#chart-run', [1])).toBe(160);
      expect(await page.locator('#chart-reference').isVisible()).toBe(false);

      await page.fill('#mark-label', 'Vacuum pump swapped');
      await page.fill('#mark-at', new Date(plant.moistureChangeAt).toISOString().slice(0, 16));
      await page.selectOption('#mark-direction', 'rise');
      await page.fill('#mark-note', 'Pump 2 in, pump 1 out for overhaul.');
      await page.click('#mark-form button[type="submit"]');
      await expect.poll(() => page.locator('#notice').textContent(), POLL).toContain('Marked');

      const marks = await plant.api.store.listMarks({ tag: MOISTURE });
      expect(marks).toHaveLength(1);
      const mark = marks[0];
      expect(mark).toMatchObject({
        label: 'Vacuum pump swapped',
        at: plant.moistureChangeAt,
        direction: 'rise',
        note: 'Pump 2 in, pump 1 out for overhaul.',
      });
      // The polling analyser evaluates the new mark; the page hears of it and draws the evidence.
      await page.waitForSelector('#verdict [data-verdict]', { timeout: 15_000 });
      const snapshot = await plant.api.store.latestEvidence(mark?.id ?? '', MOISTURE);
      expect(snapshot).not.toBeNull();
      expect(await page.locator('#verdict [data-verdict]').getAttribute('data-verdict')).toBe(
        snapshot?.verdict,
      );
      const m = Number(
        /M = (\d+)/.exec((await page.locator('#caption-reference').textContent()) ?? '')?.[1],
      );
      expect(m).toBeGreaterThan(0);
      expect(await seriesPoints(page, '#chart-reference', [1, 2])).toBe(m);
      expect(await seriesPoints(page, '#chart-comparison', [2])).toBe(snapshot?.nAfter);
      expect(
        await lineCoverage(page, '#chart-run', { x: plant.moistureChangeAt }, hex('#6b3fa0')),
      ).toBeGreaterThan(0.5);
      expect(page.url()).toContain(`mark=${mark?.id ?? ''}`);
      await page.screenshot({ path: join(ARTIFACTS, 'web-marked.png'), fullPage: true });
      await page.close();
    },
    BROWSER_TEST_MS,
  );

  it(
    "sets a tag's risk level from the page, with a token that may",
    async () => {
      const reader = await openWithToken(`/tags/${encodeURIComponent(ENERGY)}`, 'read');
      await reader.waitForSelector('#verdict [data-verdict]');
      expect(await reader.inputValue('#risk-level')).toBe('5');
      await reader.fill('#risk-level', '1');
      await reader.click('#risk-form button[type="submit"]');
      await expect.poll(() => reader.locator('#notice').textContent(), POLL).toContain('may not');
      expect((await plant.api.store.getTag(ENERGY))?.settings.riskLevel).toBeUndefined();
      await reader.close();

      const writer = await openWithToken(`/tags/${encodeURIComponent(ENERGY)}`, 'write');
      await writer.waitForSelector('#verdict [data-verdict]');
      await writer.fill('#risk-level', '1');
      await writer.click('#risk-form button[type="submit"]');
      await expect.poll(() => writer.locator('#notice').textContent(), POLL).toContain('now 1%');
      expect((await plant.api.store.getTag(ENERGY))?.settings.riskLevel).toBe(0.01);
      await writer.goto(`${plant.base}/`);
      await expect
        .poll(() =>
          writer.locator(`#tags tbody tr[data-tag="${ENERGY}"] td.num`).last().textContent(),
        )
        .toBe('1%');
      await writer.close();
    },
    BROWSER_TEST_MS,
  );

  it(
    'hands out a self-contained decision report that opens offline and prints',
    async () => {
      const path = `/api/v1/marks/${plant.marks.steamTrap}/report/${encodeURIComponent(STEAM)}`;
      expect((await fetch(`${plant.base}${path}`)).status).toBe(401);
      const response = await fetch(`${plant.base}${path}?format=html`, {
        headers: plant.api.as('read'),
      });
      expect(response.status).toBe(200);
      expect(response.headers.get('content-type')).toBe('text/html; charset=utf-8');
      expect(response.headers.get('content-security-policy')).toContain("default-src 'none'");
      const html = await response.text();
      const figures = (
        (await (
          await fetch(`${plant.base}${path}?format=json`, { headers: plant.api.as('read') })
        ).json()) as { figures: Figures }
      ).figures;

      // Self-contained: no script, no link, no source and no address outside the file.
      expect(html).not.toMatch(/<script|<link|<img|<iframe|\ssrc=|https?:\/\/|url\((?!#)/i);
      expect(html).toContain(CAUTION);
      for (const id of ['run', 'reference', 'risk-path', 'comparison', 'cusum', 'ewma']) {
        expect(html).toContain(`<svg id="fig-${id}"`);
      }
      expect(html.match(/<circle class="diff/g)).toHaveLength(figures.window.m);
      expect(html).toContain('The question');
      expect(html).toContain('It assumes:');
      for (const row of figures.table) expect(html).toContain(escapeHtml(row.value));

      // Opened from a file with the network watched: nothing is fetched.
      const dir = await mkdtemp(join(tmpdir(), 'trueshift-report-'));
      const file = join(dir, 'report.html');
      await writeFile(file, html);
      const page = await context.newPage();
      const requests: string[] = [];
      page.on('request', (request) => requests.push(request.url()));
      await page.goto(pathToFileURL(file).href);
      expect(requests).toEqual([pathToFileURL(file).href]);
      expect(await page.locator('svg.plot').count()).toBe(6);
      expect(await page.locator('#fig-reference circle.diff').count()).toBe(figures.window.m);
      await page.screenshot({ path: join(ARTIFACTS, 'web-report.png'), fullPage: true });
      const pdf = await page.pdf({ path: join(ARTIFACTS, 'web-report.pdf'), format: 'A4' });
      expect(pdf.subarray(0, 4).toString('latin1')).toBe('%PDF');
      await page.close();
      await rm(dir, { recursive: true, force: true });

      // The page's own button opens the same report in a new tab.
      const view = await openWithToken(`/tags/${encodeURIComponent(STEAM)}`, 'read');
      await view.waitForSelector('#open-report');
      const [tab] = await Promise.all([context.waitForEvent('page'), view.click('#open-report')]);
      await tab.waitForLoadState();
      expect(await tab.locator('h1').textContent()).toBe(
        `Decision report: ${STEAM} after “New steam trap”`,
      );
      await tab.close();
      await view.close();
    },
    BROWSER_TEST_MS,
  );
});

describe('the page where reading needs no token', () => {
  it(
    'shows the overview and follows the event stream without asking for one',
    async () => {
      const plant = await startWebPlant({ readWithoutToken: true });
      const profile = await mkdtemp(join(tmpdir(), 'trueshift-chromium-'));
      const context = await launch(profile);
      try {
        const page = await context.newPage();
        await page.goto(`${plant.base}/`);
        await page.waitForSelector(`#tags tbody tr[data-tag="${STEAM}"]`);
        expect(await page.locator('#tags tbody tr').count()).toBe(4);
        await expect.poll(() => page.locator('#live').textContent(), POLL).toBe('Live');
        expect(await page.locator('#notice').isVisible()).toBe(false);
        expect(await page.locator('#token-button').textContent()).toBe('Token: none');
        // Writing still needs one: the page asks for it instead of failing silently.
        await page.goto(`${plant.base}/tags/${encodeURIComponent(MOISTURE)}`);
        await page.waitForSelector('#mark-form');
        await page.fill('#mark-label', 'Anonymous try');
        await page.click('#mark-form button[type="submit"]');
        await expect.poll(() => page.locator('#notice').textContent(), POLL).toContain('token');
        expect(await plant.api.store.listMarks({ tag: MOISTURE })).toEqual([]);
      } finally {
        await context.close();
        await plant.close();
        await rm(profile, { recursive: true, force: true });
      }
    },
    BROWSER_TEST_MS,
  );
});
