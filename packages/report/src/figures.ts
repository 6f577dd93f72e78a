/**
 * Everything the tag view and the decision report draw for one mark on one tag, from the numbers
 * the analyser saved and the samples around the mark. Pure and JSON-serialisable, so the page (over
 * HTTP) and the report (as inline SVG) show the very same figures.
 */

import { createCusum, createEwma, cusumUpdate, ewmaUpdate } from '@trueshift/stats';
import type { Verdict } from '@trueshift/stats';
import { readEvidence } from './evidence-view.js';
import type { DirectionText, EvidenceView, ProjectionView, WelchView } from './evidence-view.js';
import {
  formatNumber,
  formatP,
  formatPercent,
  formatSigned,
  formatTime,
  withUnit,
} from './format.js';

export interface FigureInput {
  tag: { name: string; unit: string | null; description: string | null };
  mark: { id: string; at: number; label: string; note: string; direction: DirectionText };
  /** How values are analysed: "batch" or "period means of …". */
  basis: string;
  snapshot: {
    sampleTime: number;
    evaluatedAt: number;
    nAfter: number;
    risk: number | null;
    verdict: string;
    body: unknown;
  };
  /** Raw samples around the mark for the run chart, oldest first, already thinned for drawing. */
  run: { t: ArrayLike<number>; value: ArrayLike<number>; total: number; thinned: boolean };
  /** The in-control history the evidence was judged against, oldest first. */
  history: ArrayLike<number>;
  /** When the before-window's first sample was taken, if known. */
  beforeStart: number | null;
  /** The analysed values after the mark (batch values or period means) with their times. */
  after: { t: ArrayLike<number>; value: ArrayLike<number> };
  /** The risk after each evaluation since the mark. */
  path: readonly {
    evaluatedAt: number;
    sampleTime: number;
    nAfter: number;
    risk: number | null;
    verdict: string;
  }[];
  /** The smallest shift worth having, when one is set for the mark or the tag. */
  smallestShift: number | null;
}

export interface MeanSegment {
  from: number;
  to: number;
  mean: number;
}

export type ReferenceFigure =
  | {
      kind: 'dots';
      m: number;
      observed: number;
      direction: DirectionText;
      riskLevel: number;
      /** Differences at least as extreme as the observed one, in the mark's direction. */
      beyond: number;
      columnWidth: number;
      /** One entry per historical difference, sorted by x then by stack height. */
      x: number[];
      stack: number[];
      isBeyond: boolean[];
    }
  | {
      kind: 'bins';
      m: number;
      observed: number;
      direction: DirectionText;
      riskLevel: number;
      beyond: number;
      lower: number;
      width: number;
      counts: number[];
    };

export interface Figures {
  tag: FigureInput['tag'];
  mark: FigureInput['mark'];
  basis: string;
  evaluatedAt: number;
  sampleTime: number;
  question: string;
  verdict: Verdict;
  verdictTitle: string;
  verdictText: string;
  evidence: EvidenceView | null;
  window: {
    nHistory: number;
    nBefore: number;
    nAfter: number;
    m: number;
    beforeStart: number | null;
    markAt: number;
    afterEnd: number;
  };
  run: {
    t: number[];
    value: (number | null)[];
    total: number;
    thinned: boolean;
    markAt: number;
    before: MeanSegment | null;
    after: MeanSegment | null;
  };
  reference: ReferenceFigure | null;
  path: {
    nAfter: number[];
    risk: (number | null)[];
    riskLevel: number;
    projection: ProjectionView | null;
  };
  comparison: {
    before: number[];
    after: number[];
    beforeMean: number | null;
    afterMean: number | null;
  };
  cusum: {
    n: number[];
    upper: number[];
    lower: number[];
    k: number;
    h: number;
    signalAt: number | null;
    changeSide: 'upper' | 'lower' | null;
    changePoint: number | null;
  } | null;
  ewma: {
    n: number[];
    z: number[];
    lower: number[];
    upper: number[];
    target: number;
    signalAt: number | null;
  } | null;
  table: { label: string; value: string }[];
}

const VERDICT_TITLES: Readonly<Record<Verdict, string>> = {
  'not-enough-history': 'History too short',
  'still-gathering': 'Still gathering evidence',
  'credible-rise': 'Credible rise',
  'credible-fall': 'Credible fall',
  'credible-but-small': 'Credible but small',
  'no-credible-shift': 'No credible shift',
};

export function verdictTitle(verdict: Verdict): string {
  return VERDICT_TITLES[verdict];
}

/** A dot plot gets unreadable past this many dots; more differences are shown as bins. */
export const MAX_DOTS = 2000;
const BINS = 60;

function tolerance(observed: number, differences: ArrayLike<number>): number {
  // The tie tolerance of @trueshift/stats referenceRisk, so the dots marked as beyond the line are
  // the very differences the risk counted.
  let sum = 0;
  for (const d of Array.from(differences)) sum += Math.abs(d);
  const meanAbs = differences.length > 0 ? sum / differences.length : 0;
  return 1e-9 * Math.max(1, Math.abs(observed), meanAbs);
}

function beyondTest(
  direction: DirectionText,
  observed: number,
  tol: number,
): (d: number) => boolean {
  if (direction === 'rise') return (d) => d >= observed - tol;
  if (direction === 'fall') return (d) => d <= observed + tol;
  return (d) => Math.abs(d) >= Math.abs(observed) - tol;
}

/** Dots stacked in columns: a column per ~2√M so the pile's shape shows without towers. */
export function referenceFigure(
  differences: ArrayLike<number>,
  observed: number,
  direction: DirectionText,
  riskLevel: number,
): ReferenceFigure {
  const m = differences.length;
  const isBeyond = beyondTest(direction, observed, tolerance(observed, differences));
  let min = Number.POSITIVE_INFINITY;
  let max = Number.NEGATIVE_INFINITY;
  let beyond = 0;
  for (let i = 0; i < m; i++) {
    const d = differences[i] ?? Number.NaN;
    if (d < min) min = d;
    if (d > max) max = d;
    if (isBeyond(d)) beyond += 1;
  }
  const common = { m, observed, direction, riskLevel, beyond };
  if (m > MAX_DOTS) {
    const width = max > min ? (max - min) / BINS : 0;
    const counts = new Array<number>(width > 0 ? BINS : 1).fill(0);
    for (let i = 0; i < m; i++) {
      const d = differences[i] ?? Number.NaN;
      const b = width > 0 ? Math.min(BINS - 1, Math.max(0, Math.floor((d - min) / width))) : 0;
      counts[b] = (counts[b] ?? 0) + 1;
    }
    return { kind: 'bins', ...common, lower: min, width, counts };
  }
  const columns = Math.min(80, Math.max(10, Math.round(2 * Math.sqrt(m))));
  const columnWidth = max > min ? (max - min) / columns : 1;
  const sorted = Array.from(differences).sort((a, b) => a - b);
  const x: number[] = [];
  const stack: number[] = [];
  const flags: boolean[] = [];
  const heights = new Map<number, number>();
  for (const d of sorted) {
    const column = max > min ? Math.min(columns - 1, Math.floor((d - min) / columnWidth)) : 0;
    const height = (heights.get(column) ?? 0) + 1;
    heights.set(column, height);
    x.push(min + (column + 0.5) * columnWidth);
    stack.push(height);
    flags.push(isBeyond(d));
  }
  return { kind: 'dots', ...common, columnWidth, x, stack, isBeyond: flags };
}

function cusumPath(
  after: ArrayLike<number>,
  evidence: EvidenceView,
): NonNullable<Figures['cusum']> | null {
  const { mean, sigma } = evidence.baseline;
  const { k, h } = evidence.cusum;
  if (mean === null || sigma === null || !(sigma > 0) || k === null || h === null) return null;
  const state = createCusum({ target: mean, sigma, k, h });
  const n: number[] = [];
  const upper: number[] = [];
  const lower: number[] = [];
  for (let i = 0; i < after.length; i++) {
    cusumUpdate(state, after[i] ?? Number.NaN);
    n.push(i + 1);
    upper.push(state.upper);
    lower.push(state.lower);
  }
  return {
    n,
    upper,
    lower,
    k,
    h,
    signalAt: evidence.cusum.signalAt,
    changeSide: evidence.cusum.changeSide,
    changePoint: evidence.cusum.changePoint,
  };
}

function ewmaPath(
  after: ArrayLike<number>,
  evidence: EvidenceView,
): NonNullable<Figures['ewma']> | null {
  const { mean, sigma } = evidence.baseline;
  const { lambda, L } = evidence.ewma;
  if (mean === null || sigma === null || !(sigma > 0) || lambda === null || L === null) return null;
  const state = createEwma({ target: mean, sigma, lambda, L });
  const out = {
    n: [] as number[],
    z: [] as number[],
    lower: [] as number[],
    upper: [] as number[],
  };
  for (let i = 0; i < after.length; i++) {
    ewmaUpdate(state, after[i] ?? Number.NaN);
    out.n.push(i + 1);
    out.z.push(state.z);
    out.lower.push(state.lowerLimit);
    out.upper.push(state.upperLimit);
  }
  return { ...out, target: mean, signalAt: evidence.ewma.signalAt };
}

function verb(direction: DirectionText): string {
  return direction === 'rise' ? 'rise' : direction === 'fall' ? 'fall' : 'shift';
}

export function questionOf(tag: string, mark: FigureInput['mark']): string {
  return `Did ${tag} ${verb(mark.direction)} after “${mark.label}” (${formatTime(mark.at)}), and how sure can we be?`;
}

function pInDirection(welch: WelchView, direction: DirectionText): number | null {
  return direction === 'rise' ? welch.pRise : direction === 'fall' ? welch.pFall : welch.pTwoSided;
}

function welchText(welch: WelchView, direction: DirectionText): string {
  const sided = direction === 'either' ? 'two-sided' : `one-sided for a ${direction}`;
  const p = formatP(pInDirection(welch, direction));
  return `t = ${formatNumber(welch.t, 3)}, df = ${formatNumber(welch.df, 3)}, p ${p.startsWith('<') ? p : `= ${p}`} (${sided})`;
}

function projectionText(projection: ProjectionView | null): string {
  if (projection === null) return '–';
  if (projection.status === 'reached') return 'none: the risk level is reached';
  if (projection.status === 'reachable') {
    return `about ${projection.more ?? '?'} more (an after-window of ${projection.nAfter ?? '?'})`;
  }
  return `not reachable: ${projection.reason ?? 'the history cannot resolve it'}`;
}

function summaryTable(
  input: FigureInput,
  evidence: EvidenceView | null,
  verdict: Verdict,
): { label: string; value: string }[] {
  const unit = input.tag.unit;
  const rows: { label: string; value: string }[] = [
    { label: 'Verdict', value: verdictTitle(verdict) },
  ];
  if (evidence === null) {
    rows.push({ label: 'Evidence', value: 'none yet: the history is too short to judge' });
    return rows;
  }
  const e = evidence;
  const window = (w: typeof e.before, name: string): string =>
    `${name} = ${w.n}, mean ${withUnit(formatNumber(w.mean), unit)}, SD ${formatNumber(w.sd, 3)}`;
  rows.push(
    { label: 'Before the change', value: window(e.before, 'n_A') },
    { label: 'After the change', value: window(e.after, 'n_B') },
    { label: 'Observed shift', value: withUnit(formatSigned(e.observedShift), unit) },
  );
  if (e.welch !== null) {
    const confidence = e.welch.confidence ?? 1 - e.riskLevel;
    rows.push({
      label: `Confidence interval of the shift (${formatPercent(confidence)})`,
      value: withUnit(`${formatSigned(e.welch.ciLower)} to ${formatSigned(e.welch.ciUpper)}`, unit),
    });
  }
  const ref = e.reference;
  rows.push({
    label: 'Reference risk',
    value:
      ref.status === 'ok'
        ? `${ref.countAtLeast === 0 ? `less than ${formatPercent(1 / Math.max(1, ref.m))}` : formatPercent(ref.risk)} (${ref.countAtLeast ?? '?'} of ${ref.m} historical differences as large) against a risk level of ${formatPercent(e.riskLevel)}`
        : `not known: ${ref.m} historical differences, ${ref.minimumM} needed for a ${formatPercent(e.riskLevel)} risk level`,
  });
  rows.push({
    label: "Welch's t test",
    value: e.welch === null ? 'needs two samples on each side' : welchText(e.welch, e.direction),
  });
  if (e.welchEffective !== null) {
    rows.push({
      label: "Welch's t test, effective sizes",
      value: `${welchText(e.welchEffective, e.direction)}; n_eff ${formatNumber(e.welchEffective.effectiveBefore, 3)} and ${formatNumber(e.welchEffective.effectiveAfter, 3)}`,
    });
  }
  rows.push({
    label: 'Autocorrelation',
    value: `${e.autocorrelation.flagged ? 'Warning' : 'No warning'}: lag-1 r1 = ${formatNumber(e.autocorrelation.r1, 3)} against ±${formatNumber(e.autocorrelation.limit, 3)}`,
  });
  rows.push({
    label: 'CUSUM',
    value: `k = ${formatNumber(e.cusum.k, 3)} σ, h = ${formatNumber(e.cusum.h, 3)} σ; ${
      e.cusum.signalAt === null ? 'no signal' : `signal at after-sample ${e.cusum.signalAt}`
    }${
      e.cusum.changePoint === null
        ? ''
        : `; shift estimated to start ${e.cusum.changePoint === 0 ? 'right at the change' : `after after-sample ${e.cusum.changePoint}`}, new level ${withUnit(formatNumber(e.cusum.estimatedMean), unit)}`
    }`,
  });
  rows.push({
    label: 'EWMA',
    value: `λ = ${formatNumber(e.ewma.lambda, 3)}, L = ${formatNumber(e.ewma.L, 4)}; ${
      e.ewma.signalAt === null ? 'no signal' : `signal at after-sample ${e.ewma.signalAt}`
    }`,
  });
  rows.push({
    label: 'Baseline',
    value: `mean ${withUnit(formatNumber(e.baseline.mean), unit)}, σ ${formatNumber(e.baseline.sigma, 3)} (${e.baseline.sigmaMethod.replace(/-/g, ' ')}), ${e.nHistory} values of history`,
  });
  rows.push({ label: 'Samples still needed', value: projectionText(e.samplesNeeded) });
  if (e.samplesNeededForSmallest !== null) {
    rows.push({
      label: `Samples needed for the smallest shift worth having (${withUnit(formatNumber(input.smallestShift), unit)})`,
      value: projectionText(e.samplesNeededForSmallest),
    });
  }
  return rows;
}

/** The figures of one evaluation of a mark on a tag. */
export function buildFigures(input: FigureInput, differences: ArrayLike<number>): Figures {
  const evidence = readEvidence(input.snapshot.body);
  const verdict: Verdict = evidence?.verdict ?? 'not-enough-history';
  const markAt = input.mark.at;
  const nAfter = evidence?.nAfter ?? input.snapshot.nAfter;
  const after = Array.from(input.after.value).slice(0, nAfter);
  const nBefore = evidence?.nBefore ?? 0;
  const history = input.history;
  const before: number[] = [];
  for (let i = Math.max(0, history.length - nBefore); i < history.length; i++) {
    before.push(history[i] ?? Number.NaN);
  }
  const beforeMean = evidence?.before.mean ?? null;
  const afterMean = evidence?.after.mean ?? null;
  const observed = evidence?.observedShift ?? null;
  const riskLevel = evidence?.riskLevel ?? 0.05;

  const pathPoints = [...input.path].sort(
    (a, b) => a.nAfter - b.nAfter || a.evaluatedAt - b.evaluatedAt,
  );
  // A window size judged twice (a correction, a restart) keeps its latest risk.
  const byN = new Map<number, number | null>();
  for (const p of pathPoints) byN.set(p.nAfter, p.risk);

  return {
    tag: input.tag,
    mark: input.mark,
    basis: input.basis,
    evaluatedAt: input.snapshot.evaluatedAt,
    sampleTime: input.snapshot.sampleTime,
    question: questionOf(input.tag.name, input.mark),
    verdict,
    verdictTitle: verdictTitle(verdict),
    verdictText:
      evidence?.verdictText ??
      'The history before the change is too short for the evidence to be judged.',
    evidence,
    window: {
      nHistory: history.length,
      nBefore,
      nAfter,
      m: differences.length,
      beforeStart: input.beforeStart,
      markAt,
      afterEnd: input.snapshot.sampleTime,
    },
    run: {
      t: Array.from(input.run.t),
      value: Array.from(input.run.value, (v) => (Number.isFinite(v) ? v : null)),
      total: input.run.total,
      thinned: input.run.thinned,
      markAt,
      before:
        beforeMean === null || input.beforeStart === null
          ? null
          : { from: input.beforeStart, to: markAt, mean: beforeMean },
      after:
        afterMean === null
          ? null
          : { from: markAt, to: Math.max(markAt, input.snapshot.sampleTime), mean: afterMean },
    },
    reference:
      observed === null || differences.length === 0
        ? null
        : referenceFigure(differences, observed, input.mark.direction, riskLevel),
    path: {
      nAfter: [...byN.keys()],
      risk: [...byN.values()],
      riskLevel,
      projection: evidence?.samplesNeeded ?? null,
    },
    comparison: { before, after, beforeMean, afterMean },
    cusum: evidence === null ? null : cusumPath(after, evidence),
    ewma: evidence === null ? null : ewmaPath(after, evidence),
    table: summaryTable(input, evidence, verdict),
  };
}
