/**
 * Static plots as inline SVG for the decision report, which must open offline years from now with
 * no script: a small layer-based plotter (axes, lines, dots, bars, labelled reference lines) and
 * the report's six figures on top of it. The live page draws the same figures with uPlot.
 */

import { escapeHtml, formatNumber, formatPercent } from './format.js';
import type { Figures } from './figures.js';

/** The project's palette; every colour also has a label or a shape, never colour alone. */
export const PALETTE = {
  ink: '#1d2433',
  muted: '#5b6576',
  grid: '#dde2ea',
  before: '#2f6690',
  after: '#b5541c',
  mark: '#6b3fa0',
  limit: '#a11d33',
  within: '#6f7d91',
  beyond: '#b5541c',
  upper: '#2f6690',
  lower: '#b5541c',
} as const;

export interface AxisSpec {
  label: string;
  min: number;
  max: number;
  /** Time axes get calendar ticks (UTC). */
  time?: boolean;
  /** Counts: ticks on whole numbers only. */
  whole?: boolean;
  format?: (value: number) => string;
}

export type Layer =
  | {
      kind: 'line';
      xs: readonly number[];
      ys: readonly (number | null)[];
      color: string;
      width?: number;
      dash?: string;
      className?: string;
    }
  | {
      kind: 'dots';
      xs: readonly number[];
      ys: readonly number[];
      r: number;
      color: string;
      hollow?: boolean;
      className: string;
    }
  | {
      kind: 'bars';
      x0: readonly number[];
      x1: readonly number[];
      ys: readonly number[];
      color: string;
      className: string;
    }
  | {
      kind: 'hline';
      y: number;
      x0?: number;
      x1?: number;
      color: string;
      dash?: string;
      label: string;
      className: string;
    }
  | { kind: 'vline'; x: number; color: string; dash?: string; label: string; className: string };

export interface LegendEntry {
  label: string;
  color: string;
  swatch: 'line' | 'dashed' | 'dot' | 'hollow' | 'bar';
}

export interface PlotSpec {
  id: string;
  title: string;
  /** What the figure shows, in words, for screen readers and for anyone who cannot see it. */
  description: string;
  x: AxisSpec;
  y: AxisSpec;
  layers: Layer[];
  legend: LegendEntry[];
  width?: number;
  height?: number;
}

const MARGIN = { top: 16, right: 24, bottom: 46, left: 68 };

/** Round tick steps: 1, 2, 2.5 or 5 times a power of ten, about `count` of them. */
export function niceTicks(min: number, max: number, count = 6, whole = false): number[] {
  if (!(Number.isFinite(min) && Number.isFinite(max))) return [];
  if (max <= min) return [min];
  const raw = (max - min) / count;
  const power = 10 ** Math.floor(Math.log10(raw));
  // Counts (samples, stacked dots) get whole-number steps: a tick at 2.5 dots means nothing.
  const factors = whole ? [1, 2, 5, 10] : [1, 2, 2.5, 5, 10];
  const step = Math.max(
    whole ? 1 : 0,
    factors.map((f) => f * power).find((s) => s >= raw) ?? 10 * power,
  );
  const ticks: number[] = [];
  for (let v = Math.ceil(min / step) * step; v <= max + step * 1e-9; v += step) {
    ticks.push(Math.abs(v) < step * 1e-9 ? 0 : Number(v.toPrecision(12)));
  }
  return ticks;
}

const MINUTE = 60_000;
const HOUR = 60 * MINUTE;
const DAY = 24 * HOUR;
const TIME_STEPS = [
  MINUTE,
  5 * MINUTE,
  15 * MINUTE,
  30 * MINUTE,
  HOUR,
  3 * HOUR,
  6 * HOUR,
  12 * HOUR,
  DAY,
  2 * DAY,
  7 * DAY,
  14 * DAY,
  30 * DAY,
  91 * DAY,
  365 * DAY,
];

export function timeTicks(min: number, max: number, count = 6): number[] {
  if (!(max > min)) return [min];
  const raw = (max - min) / count;
  const step = TIME_STEPS.find((s) => s >= raw) ?? 365 * DAY;
  const ticks: number[] = [];
  for (let v = Math.ceil(min / step) * step; v <= max; v += step) ticks.push(v);
  return ticks;
}

const pad = (n: number): string => String(n).padStart(2, '0');

function timeLabel(ms: number, span: number): string {
  const d = new Date(ms);
  const date = `${pad(d.getUTCMonth() + 1)}-${pad(d.getUTCDate())}`;
  const time = `${pad(d.getUTCHours())}:${pad(d.getUTCMinutes())}`;
  if (span > 3 * DAY) return date;
  return `${date} ${time}`;
}

function fixed(v: number): string {
  return Number.isFinite(v) ? String(Math.round(v * 10) / 10) : '0';
}

/** Widens a degenerate or empty range so a flat series still gets an axis. */
export function padRange(min: number, max: number, share = 0.05): [number, number] {
  if (!(Number.isFinite(min) && Number.isFinite(max))) return [0, 1];
  if (max > min) {
    const pad = (max - min) * share;
    return [min - pad, max + pad];
  }
  const half = Math.abs(min) > 0 ? Math.abs(min) * 0.05 : 1;
  return [min - half, max + half];
}

function swatch(entry: LegendEntry): string {
  const c = escapeHtml(entry.color);
  switch (entry.swatch) {
    case 'line':
      return `<line x1="0" y1="6" x2="18" y2="6" stroke="${c}" stroke-width="2.5"/>`;
    case 'dashed':
      return `<line x1="0" y1="6" x2="18" y2="6" stroke="${c}" stroke-width="2" stroke-dasharray="5 3"/>`;
    case 'dot':
      return `<circle cx="9" cy="6" r="4" fill="${c}"/>`;
    case 'hollow':
      return `<circle cx="9" cy="6" r="4" fill="#fff" stroke="${c}" stroke-width="1.5"/>`;
    case 'bar':
      return `<rect x="3" y="1" width="12" height="10" fill="${c}"/>`;
  }
}

/** One plot as an <svg> element with its title, description, axes and legend. */
export function renderPlot(spec: PlotSpec): string {
  const width = spec.width ?? 720;
  const height = spec.height ?? 300;
  const legendRows = Math.ceil(spec.legend.length / 3);
  const plotTop = MARGIN.top + legendRows * 18;
  const left = MARGIN.left;
  const right = width - MARGIN.right;
  const top = plotTop;
  const bottom = height - MARGIN.bottom;
  const { x, y } = spec;
  const sx = (v: number): number =>
    x.max > x.min ? left + ((v - x.min) / (x.max - x.min)) * (right - left) : (left + right) / 2;
  const sy = (v: number): number =>
    y.max > y.min ? bottom - ((v - y.min) / (y.max - y.min)) * (bottom - top) : (top + bottom) / 2;
  const xFormat = x.format ?? ((v: number) => formatNumber(v, 3));
  const yFormat = y.format ?? ((v: number) => formatNumber(v, 3));
  const parts: string[] = [];
  const titleId = `${spec.id}-title`;
  const descId = `${spec.id}-desc`;
  parts.push(
    `<svg id="${escapeHtml(spec.id)}" class="plot" viewBox="0 0 ${width} ${height}" width="${width}" height="${height}" role="img" aria-labelledby="${escapeHtml(titleId)} ${escapeHtml(descId)}" font-family="system-ui, sans-serif" font-size="12">`,
    `<title id="${escapeHtml(titleId)}">${escapeHtml(spec.title)}</title>`,
    `<desc id="${escapeHtml(descId)}">${escapeHtml(spec.description)}</desc>`,
    `<defs><clipPath id="${escapeHtml(spec.id)}-clip"><rect x="${left}" y="${top}" width="${right - left}" height="${bottom - top}"/></clipPath></defs>`,
    `<rect x="0" y="0" width="${width}" height="${height}" fill="#fff"/>`,
  );

  const yTicks = niceTicks(y.min, y.max, 5, y.whole === true);
  for (const t of yTicks) {
    const py = fixed(sy(t));
    parts.push(
      `<line x1="${left}" x2="${right}" y1="${py}" y2="${py}" stroke="${PALETTE.grid}"/>`,
      `<text x="${left - 6}" y="${py}" text-anchor="end" dominant-baseline="middle" fill="${PALETTE.muted}">${escapeHtml(yFormat(t))}</text>`,
    );
  }
  const xTicks =
    x.time === true ? timeTicks(x.min, x.max, 6) : niceTicks(x.min, x.max, 7, x.whole === true);
  for (const t of xTicks) {
    const px = fixed(sx(t));
    const label = x.time === true ? timeLabel(t, x.max - x.min) : xFormat(t);
    parts.push(
      `<line x1="${px}" x2="${px}" y1="${bottom}" y2="${bottom + 4}" stroke="${PALETTE.muted}"/>`,
      `<text x="${px}" y="${bottom + 16}" text-anchor="middle" fill="${PALETTE.muted}">${escapeHtml(label)}</text>`,
    );
  }
  parts.push(
    `<line x1="${left}" x2="${right}" y1="${bottom}" y2="${bottom}" stroke="${PALETTE.muted}"/>`,
    `<line x1="${left}" x2="${left}" y1="${top}" y2="${bottom}" stroke="${PALETTE.muted}"/>`,
    `<text x="${(left + right) / 2}" y="${height - 8}" text-anchor="middle" fill="${PALETTE.ink}">${escapeHtml(x.label)}</text>`,
    `<text transform="translate(14 ${(top + bottom) / 2}) rotate(-90)" text-anchor="middle" fill="${PALETTE.ink}">${escapeHtml(y.label)}</text>`,
  );

  parts.push(`<g clip-path="url(#${escapeHtml(spec.id)}-clip)">`);
  const labels: string[] = [];
  for (const layer of spec.layers) {
    switch (layer.kind) {
      case 'line': {
        let d = '';
        let pen = false;
        for (let i = 0; i < layer.xs.length; i++) {
          const yv = layer.ys[i];
          const xv = layer.xs[i];
          if (yv === null || yv === undefined || xv === undefined || !Number.isFinite(yv)) {
            pen = false;
            continue;
          }
          d += `${pen ? 'L' : 'M'}${fixed(sx(xv))} ${fixed(sy(yv))}`;
          pen = true;
        }
        if (d !== '') {
          parts.push(
            `<path class="${escapeHtml(layer.className ?? 'series')}" d="${d}" fill="none" stroke="${escapeHtml(layer.color)}" stroke-width="${layer.width ?? 1.5}"${layer.dash === undefined ? '' : ` stroke-dasharray="${escapeHtml(layer.dash)}"`} stroke-linejoin="round"/>`,
          );
        }
        break;
      }
      case 'dots': {
        const fill = layer.hollow === true ? '#fff' : escapeHtml(layer.color);
        for (let i = 0; i < layer.xs.length; i++) {
          parts.push(
            `<circle class="${escapeHtml(layer.className)}" cx="${fixed(sx(layer.xs[i] ?? 0))}" cy="${fixed(sy(layer.ys[i] ?? 0))}" r="${layer.r}" fill="${fill}" stroke="${escapeHtml(layer.color)}" stroke-width="1"/>`,
          );
        }
        break;
      }
      case 'bars': {
        for (let i = 0; i < layer.ys.length; i++) {
          const x0 = sx(layer.x0[i] ?? 0);
          const x1 = sx(layer.x1[i] ?? 0);
          const y0 = sy(layer.ys[i] ?? 0);
          parts.push(
            `<rect class="${escapeHtml(layer.className)}" data-count="${layer.ys[i] ?? 0}" x="${fixed(x0)}" y="${fixed(y0)}" width="${fixed(Math.max(0.5, x1 - x0 - 0.5))}" height="${fixed(Math.max(0, bottom - y0))}" fill="${escapeHtml(layer.color)}"/>`,
          );
        }
        break;
      }
      case 'hline': {
        const x0 = sx(layer.x0 ?? x.min);
        const x1 = sx(layer.x1 ?? x.max);
        const py = sy(layer.y);
        parts.push(
          `<line class="${escapeHtml(layer.className)}" x1="${fixed(x0)}" x2="${fixed(x1)}" y1="${fixed(py)}" y2="${fixed(py)}" stroke="${escapeHtml(layer.color)}" stroke-width="2"${layer.dash === undefined ? '' : ` stroke-dasharray="${escapeHtml(layer.dash)}"`}/>`,
        );
        labels.push(
          `<text x="${fixed(Math.min(x1, right) - 4)}" y="${fixed(py - 5)}" text-anchor="end" fill="${escapeHtml(layer.color)}" paint-order="stroke" stroke="#fff" stroke-width="3">${escapeHtml(layer.label)}</text>`,
        );
        break;
      }
      case 'vline': {
        const px = sx(layer.x);
        parts.push(
          `<line class="${escapeHtml(layer.className)}" x1="${fixed(px)}" x2="${fixed(px)}" y1="${top}" y2="${bottom}" stroke="${escapeHtml(layer.color)}" stroke-width="2"${layer.dash === undefined ? '' : ` stroke-dasharray="${escapeHtml(layer.dash)}"`}/>`,
        );
        const anchorEnd = px > (left + right) / 2;
        labels.push(
          `<text x="${fixed(px + (anchorEnd ? -5 : 5))}" y="${top + 12}" text-anchor="${anchorEnd ? 'end' : 'start'}" fill="${escapeHtml(layer.color)}" paint-order="stroke" stroke="#fff" stroke-width="3">${escapeHtml(layer.label)}</text>`,
        );
        break;
      }
    }
  }
  parts.push('</g>', ...labels);

  spec.legend.forEach((entry, i) => {
    const lx = left + (i % 3) * Math.floor((right - left) / 3);
    const ly = MARGIN.top + Math.floor(i / 3) * 18 - 10;
    parts.push(
      `<g transform="translate(${lx} ${ly})">${swatch(entry)}<text x="24" y="10" fill="${PALETTE.ink}">${escapeHtml(entry.label)}</text></g>`,
    );
  });
  parts.push('</svg>');
  return parts.join('');
}

function extent(...arrays: readonly (readonly (number | null)[])[]): [number, number] {
  let min = Number.POSITIVE_INFINITY;
  let max = Number.NEGATIVE_INFINITY;
  for (const a of arrays) {
    for (const v of a) {
      if (v === null || !Number.isFinite(v)) continue;
      if (v < min) min = v;
      if (v > max) max = v;
    }
  }
  return [min, max];
}

function yLabel(f: Figures): string {
  return f.tag.unit === null ? f.tag.name : `${f.tag.name} (${f.tag.unit})`;
}

export function runChartSvg(f: Figures): string {
  const run = f.run;
  const [tMin, tMax] = extent(run.t, [run.markAt, run.before?.from ?? null, run.after?.to ?? null]);
  const [vMin, vMax] = extent(run.value, [run.before?.mean ?? null, run.after?.mean ?? null]);
  const [yMin, yMax] = padRange(vMin, vMax, 0.08);
  const layers: Layer[] = [
    { kind: 'line', xs: run.t, ys: run.value, color: PALETTE.within, width: 1, className: 'run' },
    {
      kind: 'vline',
      x: run.markAt,
      color: PALETTE.mark,
      label: `change: ${f.mark.label}`,
      className: 'mark-line',
    },
  ];
  if (run.before !== null) {
    layers.push({
      kind: 'hline',
      y: run.before.mean,
      x0: run.before.from,
      x1: run.before.to,
      color: PALETTE.before,
      dash: '6 3',
      label: `before mean ${formatNumber(run.before.mean)}`,
      className: 'mean-before',
    });
  }
  if (run.after !== null) {
    layers.push({
      kind: 'hline',
      y: run.after.mean,
      x0: run.after.from,
      x1: run.after.to,
      color: PALETTE.after,
      label: `after mean ${formatNumber(run.after.mean)}`,
      className: 'mean-after',
    });
  }
  return renderPlot({
    id: 'fig-run',
    title: `Run chart of ${f.tag.name}`,
    description: `${run.t.length} samples${run.thinned ? ` (thinned from ${run.total})` : ''} around the change marked at the vertical line, with the before-window's mean (dashed) and the after-window's mean (solid).`,
    x: { label: 'time (UTC)', min: tMin, max: tMax > tMin ? tMax : tMin + 1, time: true },
    y: { label: yLabel(f), min: yMin, max: yMax },
    layers,
    legend: [
      { label: 'samples', color: PALETTE.within, swatch: 'line' },
      { label: 'change mark', color: PALETTE.mark, swatch: 'line' },
      { label: 'before mean', color: PALETTE.before, swatch: 'dashed' },
      { label: 'after mean', color: PALETTE.after, swatch: 'line' },
    ],
  });
}

function beyondWords(direction: string): string {
  return direction === 'rise'
    ? 'at or above'
    : direction === 'fall'
      ? 'at or below'
      : 'at least as far from zero as';
}

export function referenceSvg(f: Figures): string {
  const ref = f.reference;
  if (ref === null) return '';
  const share = ref.m > 0 ? ref.beyond / ref.m : 0;
  const stated = `${ref.beyond} of ${ref.m} historical differences (${formatPercent(share)}) lie ${beyondWords(ref.direction)} the observed ${formatNumber(ref.observed)}.`;
  if (ref.kind === 'dots') {
    const within = { xs: [] as number[], ys: [] as number[] };
    const beyond = { xs: [] as number[], ys: [] as number[] };
    ref.x.forEach((xv, i) => {
      const target = ref.isBeyond[i] === true ? beyond : within;
      target.xs.push(xv);
      target.ys.push(ref.stack[i] ?? 0);
    });
    const [dMin, dMax] = extent(ref.x, [ref.observed]);
    const [xMin, xMax] = padRange(dMin - ref.columnWidth, dMax + ref.columnWidth, 0.02);
    const top = Math.max(1, ...ref.stack);
    const r = Math.max(1.5, Math.min(4, 200 / Math.max(top, 1) / 2));
    return renderPlot({
      id: 'fig-reference',
      title: 'Reference distribution of historical differences',
      description: `A dot plot with one dot per historical difference between an after-window mean and the before-window before it (${ref.m} dots). ${stated}`,
      x: {
        label: `difference of means${f.tag.unit === null ? '' : ` (${f.tag.unit})`}`,
        min: xMin,
        max: xMax,
      },
      y: { label: 'dots stacked', min: 0, max: top + 1, whole: true },
      layers: [
        { kind: 'dots', ...within, r, color: PALETTE.within, hollow: true, className: 'diff' },
        { kind: 'dots', ...beyond, r, color: PALETTE.beyond, className: 'diff beyond' },
        {
          kind: 'vline',
          x: ref.observed,
          color: PALETTE.ink,
          label: `observed ${formatNumber(ref.observed)}: ${formatPercent(share)} beyond`,
          className: 'observed-line',
        },
      ],
      legend: [
        { label: 'history, less extreme', color: PALETTE.within, swatch: 'hollow' },
        { label: 'history, as extreme or more', color: PALETTE.beyond, swatch: 'dot' },
        { label: 'observed difference', color: PALETTE.ink, swatch: 'line' },
      ],
    });
  }
  const x0 = ref.counts.map((_, i) => ref.lower + i * ref.width);
  const x1 = ref.counts.map((_, i) => ref.lower + (i + 1) * ref.width);
  const [xMin, xMax] = padRange(
    Math.min(ref.lower, ref.observed),
    Math.max(ref.lower + ref.width * ref.counts.length, ref.observed),
    0.02,
  );
  return renderPlot({
    id: 'fig-reference',
    title: 'Reference distribution of historical differences',
    description: `A histogram of all ${ref.m} historical differences in ${ref.counts.length} bins. ${stated}`,
    x: { label: 'difference of means', min: xMin, max: xMax },
    y: { label: 'differences per bin', min: 0, max: Math.max(1, ...ref.counts) * 1.08 },
    layers: [
      { kind: 'bars', x0, x1, ys: ref.counts, color: PALETTE.within, className: 'bin' },
      {
        kind: 'vline',
        x: ref.observed,
        color: PALETTE.ink,
        label: `observed ${formatNumber(ref.observed)}: ${formatPercent(share)} beyond`,
        className: 'observed-line',
      },
    ],
    legend: [
      { label: 'historical differences', color: PALETTE.within, swatch: 'bar' },
      { label: 'observed difference', color: PALETTE.ink, swatch: 'line' },
    ],
  });
}

export function riskPathSvg(f: Figures): string {
  const p = f.path;
  const projected =
    p.projection !== null && p.projection.status === 'reachable' ? p.projection.nAfter : null;
  const [nMin, nMax] = extent(p.nAfter, [projected]);
  const [, rMax] = extent(p.risk, [p.riskLevel]);
  const layers: Layer[] = [
    {
      kind: 'line',
      xs: p.nAfter,
      ys: p.risk,
      color: PALETTE.before,
      width: 2,
      className: 'risk-path',
    },
    {
      kind: 'dots',
      xs: p.nAfter.filter((_, i) => p.risk[i] !== null),
      ys: p.risk.filter((r): r is number => r !== null),
      r: 3,
      color: PALETTE.before,
      className: 'risk-point',
    },
    {
      kind: 'hline',
      y: p.riskLevel,
      color: PALETTE.limit,
      dash: '6 3',
      label: `risk level ${formatPercent(p.riskLevel)}`,
      className: 'risk-level',
    },
  ];
  if (projected !== null) {
    layers.push({
      kind: 'vline',
      x: projected,
      color: PALETTE.mark,
      dash: '3 3',
      label: `enough at about n = ${projected}`,
      className: 'projection',
    });
  }
  return renderPlot({
    id: 'fig-risk-path',
    title: 'Path of the risk since the change',
    description: `The reference risk after each evaluation, by the number of samples after the change, against the chosen risk level of ${formatPercent(p.riskLevel)}.${projected === null ? '' : ` If the shift is real, about ${projected} samples after the change should be enough.`}`,
    x: {
      label: 'samples after the change',
      min: Math.max(0, nMin - 1),
      max: Math.max(nMax + 1, 2),
      whole: true,
    },
    y: {
      label: 'risk of being wrong',
      min: 0,
      max: Math.min(1, Math.max(rMax * 1.1, p.riskLevel * 2)),
      format: formatPercent,
    },
    layers,
    legend: [
      { label: 'risk after each evaluation', color: PALETTE.before, swatch: 'dot' },
      { label: 'chosen risk level', color: PALETTE.limit, swatch: 'dashed' },
      ...(projected === null
        ? []
        : [
            {
              label: 'samples projected to be enough',
              color: PALETTE.mark,
              swatch: 'dashed' as const,
            },
          ]),
    ],
  });
}

/** A fixed spread within each group, so points do not hide one another and the figure is repeatable. */
export function jitter(i: number): number {
  return (((i * 0.6180339887) % 1) - 0.5) * 0.5;
}

export function comparisonSvg(f: Figures): string {
  const c = f.comparison;
  const [vMin, vMax] = extent(c.before, c.after);
  const [yMin, yMax] = padRange(vMin, vMax, 0.08);
  const layers: Layer[] = [
    {
      kind: 'dots',
      xs: c.before.map((_, i) => 1 + jitter(i)),
      ys: c.before,
      r: 3.5,
      color: PALETTE.before,
      hollow: true,
      className: 'point-before',
    },
    {
      kind: 'dots',
      xs: c.after.map((_, i) => 2 + jitter(i)),
      ys: c.after,
      r: 3.5,
      color: PALETTE.after,
      className: 'point-after',
    },
  ];
  if (c.beforeMean !== null) {
    layers.push({
      kind: 'hline',
      y: c.beforeMean,
      x0: 0.6,
      x1: 1.4,
      color: PALETTE.before,
      label: `mean ${formatNumber(c.beforeMean)}`,
      className: 'mean-before',
    });
  }
  if (c.afterMean !== null) {
    layers.push({
      kind: 'hline',
      y: c.afterMean,
      x0: 1.6,
      x1: 2.4,
      color: PALETTE.after,
      label: `mean ${formatNumber(c.afterMean)}`,
      className: 'mean-after',
    });
  }
  return renderPlot({
    id: 'fig-comparison',
    title: 'Before and after, every value',
    description: `The ${c.before.length} values of the before-window (hollow) and the ${c.after.length} values after the change (filled), each with its mean as a line.`,
    x: {
      label: 'left: before the change · right: after the change',
      min: 0.4,
      max: 2.6,
      format: (v) => (v === 1 ? 'before' : v === 2 ? 'after' : ''),
    },
    y: { label: yLabel(f), min: yMin, max: yMax },
    layers,
    legend: [
      { label: `before (n = ${c.before.length})`, color: PALETTE.before, swatch: 'hollow' },
      { label: `after (n = ${c.after.length})`, color: PALETTE.after, swatch: 'dot' },
    ],
    width: 520,
  });
}

export function cusumSvg(f: Figures): string {
  const c = f.cusum;
  if (c === null) return '';
  const [, top] = extent(c.upper, c.lower, [c.h]);
  const layers: Layer[] = [
    {
      kind: 'line',
      xs: c.n,
      ys: c.upper,
      color: PALETTE.upper,
      width: 2,
      className: 'cusum-upper',
    },
    {
      kind: 'line',
      xs: c.n,
      ys: c.lower,
      color: PALETTE.lower,
      width: 2,
      dash: '4 2',
      className: 'cusum-lower',
    },
    {
      kind: 'hline',
      y: c.h,
      color: PALETTE.limit,
      dash: '6 3',
      label: `decision limit h = ${formatNumber(c.h, 3)} σ`,
      className: 'decision-limit',
    },
  ];
  if (c.changePoint !== null) {
    layers.push({
      kind: 'vline',
      x: c.changePoint + 0.5,
      color: PALETTE.mark,
      dash: '3 3',
      label:
        c.changePoint === 0
          ? 'shift estimated at the change'
          : `shift estimated after sample ${c.changePoint}`,
      className: 'change-point',
    });
  }
  return renderPlot({
    id: 'fig-cusum',
    title: 'CUSUM since the change',
    description: `Upward (C+, solid) and downward (C−, dashed) cumulative sums in σ units over the ${c.n.length} samples after the change, against the decision limit h = ${formatNumber(c.h, 3)}.${c.signalAt === null ? ' No signal.' : ` First signal at sample ${c.signalAt}.`}`,
    x: {
      label: 'samples after the change',
      min: 0,
      max: Math.max(2, c.n.length + 1),
      whole: true,
    },
    y: { label: 'cumulative sum (σ)', min: 0, max: Math.max(top * 1.1, 1) },
    layers,
    legend: [
      { label: 'C+ (upward)', color: PALETTE.upper, swatch: 'line' },
      { label: 'C− (downward)', color: PALETTE.lower, swatch: 'dashed' },
      { label: 'decision limit', color: PALETTE.limit, swatch: 'dashed' },
    ],
  });
}

export function ewmaSvg(f: Figures): string {
  const e = f.ewma;
  if (e === null) return '';
  const [lo, hi] = extent(e.z, e.lower, e.upper, [e.target]);
  const [yMin, yMax] = padRange(lo, hi, 0.08);
  return renderPlot({
    id: 'fig-ewma',
    title: 'EWMA since the change',
    description: `The exponentially weighted moving average of the ${e.n.length} samples after the change, with its limits around the history's mean ${formatNumber(e.target)}.${e.signalAt === null ? ' No signal.' : ` First outside its limits at sample ${e.signalAt}.`}`,
    x: {
      label: 'samples after the change',
      min: 0,
      max: Math.max(2, e.n.length + 1),
      whole: true,
    },
    y: { label: yLabel(f), min: yMin, max: yMax },
    layers: [
      {
        kind: 'line',
        xs: e.n,
        ys: e.upper,
        color: PALETTE.limit,
        dash: '6 3',
        className: 'ewma-limit',
      },
      {
        kind: 'line',
        xs: e.n,
        ys: e.lower,
        color: PALETTE.limit,
        dash: '6 3',
        className: 'ewma-limit',
      },
      {
        kind: 'hline',
        y: e.target,
        color: PALETTE.muted,
        dash: '2 3',
        label: `history mean ${formatNumber(e.target)}`,
        className: 'ewma-target',
      },
      { kind: 'line', xs: e.n, ys: e.z, color: PALETTE.before, width: 2, className: 'ewma' },
    ],
    legend: [
      { label: 'EWMA', color: PALETTE.before, swatch: 'line' },
      { label: 'limits', color: PALETTE.limit, swatch: 'dashed' },
      { label: 'history mean', color: PALETTE.muted, swatch: 'dashed' },
    ],
  });
}
