import { readFileSync, readdirSync } from 'node:fs';
import { createRequire } from 'node:module';
import { dirname, extname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
// For its FastifySchema fields (summary, tags, hide), which document these routes in the API's OpenAPI.
import type {} from '@fastify/swagger';
import type { TypeBoxTypeProvider } from '@fastify/type-provider-typebox';
import { Type } from '@sinclair/typebox';
import type { ResolvedTagSettings } from '@trueshift/analyser';
import type { RouteScope } from '@trueshift/api';
import { CAUTION } from '@trueshift/config';
import type { ResolvedConfig } from '@trueshift/config';
import { TAG_NAME_MAX_LENGTH } from '@trueshift/formats';
import { buildDecisionReport } from '@trueshift/report';
import type { Store } from '@trueshift/store';
import type { FastifyInstance, FastifyReply } from 'fastify';
import { loadFigures } from './figures-source.js';
import { loadOverview } from './overview-source.js';
import { pageShell } from './page.js';

declare module 'fastify' {
  interface FastifyContextConfig {
    /** What the caller needs (the API's access hook reads it); none means admin-only. */
    scope?: RouteScope;
  }
}

export interface WebDeps {
  store: Store;
  clock: () => number;
  /** For the default risk level shown on the overview; the project's defaults without it. */
  config?: ResolvedConfig;
}

/** Where the API's routes live; the report and overview routes sit beside them. */
const API = '/api/v1';

/**
 * The page's own files: plain ES modules and CSS with no build step, read once at start-up. Only
 * these names are ever served, so a request cannot walk out of the folder.
 */
const ASSETS_DIR = fileURLToPath(new URL('../assets/', import.meta.url));
const TYPES: Readonly<Record<string, string>> = {
  '.js': 'text/javascript; charset=utf-8',
  '.css': 'text/css; charset=utf-8',
};

interface Asset {
  body: Buffer;
  type: string;
}

function readAssets(): Map<string, Asset> {
  const assets = new Map<string, Asset>();
  for (const name of readdirSync(ASSETS_DIR)) {
    const type = TYPES[extname(name)];
    if (type === undefined || !/^[a-z0-9-]+\.[a-z]+$/.test(name)) continue;
    assets.set(name, { body: readFileSync(join(ASSETS_DIR, name)), type });
  }
  return assets;
}

/**
 * uPlot draws the page's charts: about 50 kB minified with no dependencies, canvas-based so a
 * history of thousands of samples stays quick on a tablet, MIT-licensed and maintained for years.
 * Chart.js would do as well at four times the size; the page needs lines, points and bars only.
 */
function readPlotLibrary(): Map<string, Asset> {
  const dist = dirname(createRequire(import.meta.url).resolve('uplot'));
  return new Map([
    ['uplot.js', { body: readFileSync(join(dist, 'uPlot.iife.min.js')), type: TYPES['.js'] ?? '' }],
    ['uplot.css', { body: readFileSync(join(dist, 'uPlot.min.css')), type: TYPES['.css'] ?? '' }],
  ]);
}

/** The page may talk to its own origin only; nothing is loaded from anywhere else. */
const PAGE_POLICY = [
  "default-src 'self'",
  "script-src 'self'",
  // uPlot sizes its elements through style attributes.
  "style-src 'self' 'unsafe-inline'",
  "img-src 'self' data: blob:",
  "connect-src 'self'",
  "object-src 'none'",
  "base-uri 'none'",
  "frame-ancestors 'none'",
  "form-action 'self'",
].join('; ');

/** The report has no script and needs nothing outside itself. */
const REPORT_POLICY = "default-src 'none'; style-src 'unsafe-inline'; img-src data:";

function sendAsset(reply: FastifyReply, asset: Asset): FastifyReply {
  return reply
    .type(asset.type)
    .header('cache-control', 'no-cache')
    .header('x-content-type-options', 'nosniff')
    .send(asset.body);
}

function fileNamePart(text: string): string {
  return (
    text
      .toLowerCase()
      .replace(/[^a-z0-9]+/g, '-')
      .replace(/^-+|-+$/g, '')
      .slice(0, 60) || 'tag'
  );
}

const MarkTagParams = Type.Object({
  id: Type.String({ minLength: 1, maxLength: 100 }),
  tag: Type.String({ minLength: 1, maxLength: TAG_NAME_MAX_LENGTH }),
});

/**
 * Serves the page (GET / and GET /tags/:name), its assets, the overview of every tag's state and
 * the decision report of a mark on a tag. Mount it on the API's Fastify instance: the API's access
 * hook guards the /api/v1 routes here by their declared scope, and its error handler answers
 * their errors from the catalogue.
 */
export function registerWeb(app: FastifyInstance, deps: WebDeps): void {
  const { store, clock } = deps;
  const defaults: Partial<ResolvedTagSettings> =
    deps.config === undefined ? {} : { riskLevel: deps.config.analysis.riskLevel };
  const assets = readAssets();
  const vendor = readPlotLibrary();
  const shell = pageShell(CAUTION);
  const api = app.withTypeProvider<TypeBoxTypeProvider>();

  const page = (_request: unknown, reply: FastifyReply): FastifyReply =>
    reply
      .type('text/html; charset=utf-8')
      .header('content-security-policy', PAGE_POLICY)
      .header('x-content-type-options', 'nosniff')
      .header('referrer-policy', 'no-referrer')
      .header('cache-control', 'no-cache')
      .send(shell);

  const hidden = { hide: true } as const;
  api.get('/', { config: { scope: 'public' }, schema: hidden }, page);
  api.get(
    '/tags/:name',
    {
      config: { scope: 'public' },
      schema: { ...hidden, params: Type.Object({ name: Type.String({ minLength: 1 }) }) },
    },
    page,
  );
  api.get(
    '/assets/:file',
    {
      config: { scope: 'public' },
      schema: { ...hidden, params: Type.Object({ file: Type.String({ maxLength: 100 }) }) },
    },
    async (request, reply) => {
      const asset = assets.get(request.params.file);
      if (asset === undefined) {
        reply.callNotFound();
        return reply;
      }
      return sendAsset(reply, asset);
    },
  );
  api.get(
    '/assets/vendor/:file',
    {
      config: { scope: 'public' },
      schema: { ...hidden, params: Type.Object({ file: Type.String({ maxLength: 100 }) }) },
    },
    async (request, reply) => {
      const asset = vendor.get(request.params.file);
      if (asset === undefined) {
        reply.callNotFound();
        return reply;
      }
      return sendAsset(reply, asset);
    },
  );

  api.get(
    `${API}/overview`,
    {
      config: { scope: 'read' },
      schema: {
        summary: "Every tag's state at a glance, most urgent first",
        description:
          'States: data-problem (a stale, stuck or out-of-range alert not cleared), alert-open (a shift alert nobody acknowledged), credible-shift, gathering (a mark waiting for evidence), watching.',
        tags: ['page'],
      },
    },
    async () => ({
      caution: CAUTION,
      generatedAt: clock(),
      tags: await loadOverview(store, defaults),
    }),
  );

  api.get(
    `${API}/marks/:id/report/:tag`,
    {
      config: { scope: 'read' },
      schema: {
        summary: 'The decision report of a mark on one of its tags',
        description:
          'format=html (default): one self-contained, print-ready HTML file with the question, the data window, every figure as inline SVG, the numbers, the methods and their assumptions, and the caution. format=json: the same figures as data, as the page draws them.',
        tags: ['evidence'],
        params: MarkTagParams,
        querystring: Type.Object(
          {
            format: Type.Union([Type.Literal('html'), Type.Literal('json')], { default: 'html' }),
          },
          { additionalProperties: false },
        ),
      },
    },
    async (request, reply) => {
      const figures = await loadFigures(store, request.params.id, request.params.tag);
      if (request.query.format === 'json') {
        return reply.header('cache-control', 'no-store').send({ caution: CAUTION, figures });
      }
      const html = buildDecisionReport(figures, { caution: CAUTION, generatedAt: clock() });
      const name = `trueshift-${fileNamePart(figures.tag.name)}-${fileNamePart(figures.mark.label)}.html`;
      return reply
        .type('text/html; charset=utf-8')
        .header('content-security-policy', REPORT_POLICY)
        .header('content-disposition', `inline; filename="${name}"`)
        .header('x-content-type-options', 'nosniff')
        .header('cache-control', 'no-store')
        .send(html);
    },
  );
}
