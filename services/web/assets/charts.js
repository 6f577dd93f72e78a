// The tag view's charts, drawn with uPlot (loaded as the global uPlot before this module). Reference
// lines and their labels are drawn in uPlot's draw hook, so every line says what it is in words.

import { num, pct } from './format.js';

export const COLORS = {
  ink: '#1d2433',
  muted: '#505a6b',
  grid: '#e3e7ed',
  samples: '#6f7d91',
  before: '#2f6690',
  after: '#b5541c',
  mark: '#6b3fa0',
  limit: '#a11d33',
  within: '#6f7d91',
  beyond: '#b5541c',
};

const HEIGHT = 260;
/** Tick steps for counts (samples, stacked dots): whole numbers only. */
const WHOLE = [1, 2, 5, 10, 20, 50, 100, 200, 500, 1000, 2000, 5000];

function ratio() {
  return window.devicePixelRatio || 1;
}

function axis(label, extra = {}) {
  return {
    label,
    stroke: COLORS.ink,
    grid: { stroke: COLORS.grid, width: 1 },
    ticks: { stroke: COLORS.grid, width: 1 },
    labelFont: '600 12px system-ui',
    font: '12px system-ui',
    ...extra,
  };
}

function text(u, label, x, y, color, align = 'left') {
  const ctx = u.ctx;
  const r = ratio();
  ctx.save();
  ctx.font = `600 ${12 * r}px system-ui, sans-serif`;
  ctx.textAlign = align;
  ctx.textBaseline = 'bottom';
  ctx.lineWidth = 4 * r;
  ctx.strokeStyle = '#ffffff';
  ctx.strokeText(label, x, y);
  ctx.fillStyle = color;
  ctx.fillText(label, x, y);
  ctx.restore();
}

/** A vertical line across the plot at data x, with a label at its top. */
export function drawVLine(u, x, color, label, dashed = false) {
  const px = u.valToPos(x, 'x', true);
  const { left, top, width, height } = u.bbox;
  if (!(px >= left - 1 && px <= left + width + 1)) return;
  const ctx = u.ctx;
  const r = ratio();
  ctx.save();
  ctx.strokeStyle = color;
  ctx.lineWidth = 2.5 * r;
  ctx.setLineDash(dashed ? [6 * r, 4 * r] : []);
  ctx.beginPath();
  ctx.moveTo(px, top);
  ctx.lineTo(px, top + height);
  ctx.stroke();
  ctx.restore();
  const right = px > left + width / 2;
  text(u, label, px + (right ? -6 : 6) * r, top + 16 * r, color, right ? 'right' : 'left');
}

/** A horizontal segment at data y from x0 to x1 (whole width when not given), labelled. */
export function drawHLine(u, y, color, label, { x0, x1, dashed = false } = {}) {
  const { left, top, width, height } = u.bbox;
  const py = u.valToPos(y, 'y', true);
  if (!(py >= top - 1 && py <= top + height + 1)) return;
  const a = x0 === undefined ? left : Math.max(left, u.valToPos(x0, 'x', true));
  const b = x1 === undefined ? left + width : Math.min(left + width, u.valToPos(x1, 'x', true));
  const ctx = u.ctx;
  const r = ratio();
  ctx.save();
  ctx.strokeStyle = color;
  ctx.lineWidth = 2.5 * r;
  ctx.setLineDash(dashed ? [7 * r, 4 * r] : []);
  ctx.beginPath();
  ctx.moveTo(a, py);
  ctx.lineTo(b, py);
  ctx.stroke();
  ctx.restore();
  text(u, label, b - 4 * r, py - 4 * r, color, 'right');
}

/** Removes a chart and its size watcher, leaving the container empty. */
export function clearChart(target) {
  target.plotObserver?.disconnect();
  target.plot?.destroy();
  target.plot = undefined;
  target.plotObserver = undefined;
  target.replaceChildren();
}

/** Makes a chart that follows its container's width. */
function mount(target, options, data) {
  // Live updates redraw often: the chart drawn here before goes first.
  clearChart(target);
  const width = Math.max(280, target.clientWidth);
  const u = new window.uPlot(
    { width, height: HEIGHT, legend: { live: false }, ...options },
    data,
    target,
  );
  const observer = new ResizeObserver(() => {
    const w = Math.max(280, target.clientWidth);
    if (Math.abs(w - u.width) > 4) u.setSize({ width: w, height: HEIGHT });
  });
  observer.observe(target);
  target.plotObserver = observer;
  // Tests and curious engineers can reach the chart's data from the figure.
  target.plot = u;
  return u;
}

const pointsOnly = () => null;

const pad = (n) => String(n).padStart(2, '0');

/** Time ticks as the rest of the page writes times: 24-hour clock over month-day. */
function timeTick(ms) {
  const d = new Date(ms);
  return `${pad(d.getHours())}:${pad(d.getMinutes())}\n${pad(d.getMonth() + 1)}-${pad(d.getDate())}`;
}

function range(values, pad = 0.08) {
  const finite = values.filter((v) => v !== null && Number.isFinite(v));
  if (finite.length === 0) return [0, 1];
  let lo = Math.min(...finite);
  let hi = Math.max(...finite);
  if (hi === lo) {
    const half = Math.abs(lo) > 0 ? Math.abs(lo) * 0.05 : 1;
    return [lo - half, hi + half];
  }
  const extra = (hi - lo) * pad;
  lo -= extra;
  hi += extra;
  return [lo, hi];
}

/** Run chart: samples over time, the change mark, and the before and after means. */
export function runChart(target, run, { unit, markLabel }) {
  const marks = [run.before?.mean ?? null, run.after?.mean ?? null];
  const [yMin, yMax] = range([...run.value, ...marks]);
  const times = run.t;
  // Without a mark there is no mark time to keep in view (its placeholder would stretch the axis).
  const anchor = markLabel === null ? (times[0] ?? 0) : run.markAt;
  const xMin = Math.min(times[0] ?? anchor, anchor, run.before?.from ?? anchor);
  const xMax = Math.max(times[times.length - 1] ?? anchor, anchor, run.after?.to ?? anchor);
  return mount(
    target,
    {
      ms: 1,
      scales: {
        x: { time: true, range: [xMin, xMax > xMin ? xMax : xMin + 1] },
        y: { range: [yMin, yMax] },
      },
      series: [
        { label: 'time' },
        {
          label: 'samples',
          stroke: COLORS.samples,
          width: 1.2,
          points: { show: run.t.length < 200, size: 4 },
        },
      ],
      axes: [
        axis('', { values: (_u, splits) => splits.map(timeTick), space: 64, size: 52 }),
        axis(unit ?? 'value', { size: 60 }),
      ],
      hooks: {
        draw: [
          (u) => {
            if (run.before !== null) {
              drawHLine(u, run.before.mean, COLORS.before, `before mean ${num(run.before.mean)}`, {
                x0: run.before.from,
                x1: run.before.to,
                dashed: true,
              });
            }
            if (run.after !== null) {
              drawHLine(u, run.after.mean, COLORS.after, `after mean ${num(run.after.mean)}`, {
                x0: run.after.from,
                x1: run.after.to,
              });
            }
            if (markLabel !== null) drawVLine(u, run.markAt, COLORS.mark, `change: ${markLabel}`);
          },
        ],
      },
    },
    [run.t, run.value],
  );
}

/** The reference distribution as stacked dots (or bins), with the observed difference as a line. */
export function referenceChart(target, ref, { unit }) {
  const share = ref.m > 0 ? ref.beyond / ref.m : 0;
  const label = `observed ${num(ref.observed)}: ${pct(share)} as extreme`;
  const hook = (u) => drawVLine(u, ref.observed, COLORS.ink, label);
  if (ref.kind === 'bins') {
    const x = ref.counts.map((_, i) => ref.lower + (i + 0.5) * ref.width);
    const [xMin, xMax] = range([...x, ref.observed], 0.04);
    return mount(
      target,
      {
        scales: {
          x: { time: false, range: [xMin, xMax] },
          y: { range: [0, Math.max(1, ...ref.counts) * 1.1] },
        },
        series: [
          { label: 'difference' },
          {
            label: 'differences per bin',
            stroke: COLORS.within,
            fill: '#c9d1dc',
            paths: window.uPlot.paths.bars({ size: [1, Infinity], gap: 1 }),
            points: { show: false },
          },
        ],
        axes: [axis(`difference of means${unit ? ` (${unit})` : ''}`), axis('count')],
        hooks: { draw: [hook] },
      },
      [x, ref.counts],
    );
  }
  const within = ref.stack.map((s, i) => (ref.isBeyond[i] ? null : s));
  const beyond = ref.stack.map((s, i) => (ref.isBeyond[i] ? s : null));
  const [xMin, xMax] = range([...ref.x, ref.observed], 0.04);
  const top = Math.max(1, ...ref.stack);
  const size = Math.max(3, Math.min(8, 180 / top));
  return mount(
    target,
    {
      scales: { x: { time: false, range: [xMin, xMax] }, y: { range: [0, top + 1] } },
      series: [
        { label: 'difference' },
        {
          label: 'less extreme',
          stroke: COLORS.within,
          paths: pointsOnly,
          points: { show: true, size, width: 1.5, fill: '#ffffff', stroke: COLORS.within },
        },
        {
          label: 'as extreme or more',
          stroke: COLORS.beyond,
          paths: pointsOnly,
          points: { show: true, size, width: 1.5, fill: COLORS.beyond, stroke: COLORS.beyond },
        },
      ],
      axes: [
        axis(`difference of means${unit ? ` (${unit})` : ''}`),
        axis('dots stacked', { incrs: WHOLE }),
      ],
      hooks: { draw: [hook] },
    },
    [ref.x, within, beyond],
  );
}

/** The risk after each evaluation against the risk level, and where enough samples are projected. */
export function riskPathChart(target, path) {
  const projected =
    path.projection !== null && path.projection.status === 'reachable'
      ? path.projection.nAfter
      : null;
  const xs = path.nAfter;
  const risks = path.risk.map((r) => (r === null ? null : r * 100));
  const yTop = Math.min(
    100,
    Math.max(path.riskLevel * 200, ...risks.filter((r) => r !== null).map((r) => r * 1.1)),
  );
  const xMax = Math.max(xs[xs.length - 1] ?? 1, projected ?? 0) + 1;
  return mount(
    target,
    {
      scales: {
        x: { time: false, range: [Math.max(0, (xs[0] ?? 1) - 1), xMax] },
        y: { range: [0, yTop] },
      },
      series: [
        { label: 'samples after the change' },
        { label: 'risk (%)', stroke: COLORS.before, width: 2, points: { show: true, size: 6 } },
      ],
      axes: [
        axis('samples after the change', { incrs: WHOLE }),
        axis('risk of being wrong (%)', { size: 56 }),
      ],
      hooks: {
        draw: [
          (u) => {
            drawHLine(u, path.riskLevel * 100, COLORS.limit, `risk level ${pct(path.riskLevel)}`, {
              dashed: true,
            });
            if (projected !== null) {
              drawVLine(u, projected, COLORS.mark, `enough at about n = ${projected}`, true);
            }
          },
        ],
      },
    },
    [xs, risks],
  );
}

/** A fixed spread inside each group, the same as the report's. */
function jitter(i) {
  return (((i * 0.6180339887) % 1) - 0.5) * 0.5;
}

/** Every before and after value as a point, with the two means. */
export function comparisonChart(target, comparison, { unit }) {
  const points = [
    ...comparison.before.map((v, i) => ({ x: 1 + jitter(i), before: v, after: null })),
    ...comparison.after.map((v, i) => ({ x: 2 + jitter(i), before: null, after: v })),
  ].sort((a, b) => a.x - b.x);
  const [yMin, yMax] = range([...comparison.before, ...comparison.after]);
  return mount(
    target,
    {
      scales: { x: { time: false, range: [0.4, 2.6] }, y: { range: [yMin, yMax] } },
      series: [
        { label: 'group' },
        {
          label: `before (n = ${comparison.before.length})`,
          stroke: COLORS.before,
          paths: pointsOnly,
          points: { show: true, size: 7, width: 1.5, fill: '#ffffff', stroke: COLORS.before },
        },
        {
          label: `after (n = ${comparison.after.length})`,
          stroke: COLORS.after,
          paths: pointsOnly,
          points: { show: true, size: 7, width: 1.5, fill: COLORS.after, stroke: COLORS.after },
        },
      ],
      axes: [
        axis('', {
          splits: () => [1, 2],
          values: (_u, splits) => splits.map((s) => (s === 1 ? 'before' : 'after')),
        }),
        axis(unit ?? 'value', { size: 60 }),
      ],
      hooks: {
        draw: [
          (u) => {
            if (comparison.beforeMean !== null) {
              drawHLine(
                u,
                comparison.beforeMean,
                COLORS.before,
                `mean ${num(comparison.beforeMean)}`,
                { x0: 0.62, x1: 1.38 },
              );
            }
            if (comparison.afterMean !== null) {
              drawHLine(
                u,
                comparison.afterMean,
                COLORS.after,
                `mean ${num(comparison.afterMean)}`,
                { x0: 1.62, x1: 2.38 },
              );
            }
          },
        ],
      },
    },
    [points.map((p) => p.x), points.map((p) => p.before), points.map((p) => p.after)],
  );
}

/** CUSUM sums against the decision limit, with the estimated change point. */
export function cusumChart(target, cusum) {
  const top = Math.max(cusum.h * 1.15, ...cusum.upper, ...cusum.lower, 1);
  return mount(
    target,
    {
      scales: {
        x: { time: false, range: [0, Math.max(2, cusum.n.length + 1)] },
        y: { range: [0, top] },
      },
      series: [
        { label: 'sample after the change' },
        { label: 'C+ upward (σ)', stroke: COLORS.before, width: 2 },
        { label: 'C− downward (σ)', stroke: COLORS.after, width: 2, dash: [6, 3] },
      ],
      axes: [axis('samples after the change', { incrs: WHOLE }), axis('cumulative sum (σ)')],
      hooks: {
        draw: [
          (u) => {
            drawHLine(u, cusum.h, COLORS.limit, `decision limit h = ${num(cusum.h, 3)}`, {
              dashed: true,
            });
            if (cusum.changePoint !== null) {
              drawVLine(
                u,
                cusum.changePoint + 0.5,
                COLORS.mark,
                cusum.changePoint === 0
                  ? 'shift estimated at the change'
                  : `shift estimated after sample ${cusum.changePoint}`,
                true,
              );
            }
          },
        ],
      },
    },
    [cusum.n, cusum.upper, cusum.lower],
  );
}

/** EWMA with its time-varying limits around the history's mean. */
export function ewmaChart(target, ewma, { unit }) {
  const [yMin, yMax] = range([...ewma.z, ...ewma.lower, ...ewma.upper, ewma.target]);
  return mount(
    target,
    {
      scales: {
        x: { time: false, range: [0, Math.max(2, ewma.n.length + 1)] },
        y: { range: [yMin, yMax] },
      },
      series: [
        { label: 'sample after the change' },
        { label: 'EWMA', stroke: COLORS.before, width: 2 },
        { label: 'upper limit', stroke: COLORS.limit, width: 1.5, dash: [6, 3] },
        { label: 'lower limit', stroke: COLORS.limit, width: 1.5, dash: [6, 3] },
      ],
      axes: [
        axis('samples after the change', { incrs: WHOLE }),
        axis(unit ?? 'value', { size: 60 }),
      ],
      hooks: {
        draw: [
          (u) =>
            drawHLine(u, ewma.target, COLORS.muted, `history mean ${num(ewma.target)}`, {
              dashed: true,
            }),
        ],
      },
    },
    [ewma.n, ewma.z, ewma.upper, ewma.lower],
  );
}
