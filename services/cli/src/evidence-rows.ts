import type { EvidenceView, ProjectionView, WelchView } from '@trueshift/report';
import type { Verdict } from '@trueshift/stats';
import { num, percent, pText } from './format.js';

/**
 * The evidence as rows of a table, shared by `analyse` (evidence just computed) and `evidence`
 * (evidence the analyser stored). Both go through @trueshift/report's EvidenceView, because the
 * stored evidence is JSON where NaN became null: one reading of it for the page, the report and
 * the command line.
 */

export const VERDICT_WORDS: Readonly<Record<Verdict, string>> = {
  'not-enough-history': 'NOT ENOUGH HISTORY',
  'still-gathering': 'STILL GATHERING',
  'credible-rise': 'CREDIBLE RISE',
  'credible-fall': 'CREDIBLE FALL',
  'credible-but-small': 'CREDIBLE BUT SMALLER THAN WORTH HAVING',
  'no-credible-shift': 'NO CREDIBLE SHIFT',
};

/** Times, as the data writes them, of the after-samples the charts name; null when unknown. */
export interface SignalTimes {
  cusumSignal: string | null;
  cusumChangePoint: string | null;
  ewmaSignal: string | null;
}

const n = (value: number | null, digits?: number): string => num(value ?? Number.NaN, digits);
const pct = (value: number | null): string => percent(value ?? Number.NaN);
const p = (value: number | null): string => pText(value ?? Number.NaN);
const at = (time: string | null): string => (time === null ? '' : ` (${time})`);

/**
 * The reference risk in a few words: with no historical difference as large, the risk is only
 * known to be below one in M, and "0%" would claim more than the history can tell.
 */
export function riskText(e: EvidenceView): string {
  const ref = e.reference;
  if (ref.status !== 'ok') return 'risk not known yet';
  return ref.countAtLeast === 0
    ? `risk below ${percent(1 / Math.max(1, ref.m))}`
    : `risk ${pct(ref.risk)}`;
}

function describeProjection(projection: ProjectionView): string {
  switch (projection.status) {
    case 'reached':
      return `none: ${n(projection.nAfter)} after-samples are enough for this shift`;
    case 'reachable':
      return `${n(projection.more)} more (an after-window of ${n(projection.nAfter)})`;
    case 'not-reachable':
      return `not reachable with this history: ${projection.reason ?? 'no reason given'}`;
  }
}

function pOf(welch: WelchView, direction: EvidenceView['direction']): number | null {
  if (direction === 'rise') return welch.pRise;
  if (direction === 'fall') return welch.pFall;
  return welch.pTwoSided;
}

/**
 * Given the after-window's sample times, the times of the chart signals, so a reader can find them
 * in the data. Sample numbers are 1-based; the CUSUM's change point is the last sample where the
 * sum was zero, so the shift starts one after it.
 */
export function signalTimes(
  evidence: EvidenceView | null,
  timeOfAfter: (sample: number) => string | null,
): SignalTimes {
  const of = (sample: number | null): string | null =>
    sample === null || sample < 1 ? null : timeOfAfter(sample);
  const changePoint = evidence?.cusum.changePoint ?? null;
  return {
    cusumSignal: of(evidence?.cusum.signalAt ?? null),
    cusumChangePoint: of(changePoint === null ? null : changePoint + 1),
    ewmaSignal: of(evidence?.ewma.signalAt ?? null),
  };
}

export function evidenceRows(e: EvidenceView, times: SignalTimes): [string, string][] {
  const ref = e.reference;
  const rows: [string, string][] = [];
  rows.push([
    'Before the change',
    `last ${e.nBefore} of ${e.nHistory} history samples: mean ${n(e.before.mean)}, SD ${n(e.before.sd)}`,
  ]);
  rows.push([
    'After the change',
    `first ${e.nAfter} samples: mean ${n(e.after.mean)}, SD ${n(e.after.sd)}${e.nAfterUnused > 0 ? ` (${e.nAfterUnused} later samples beyond the cap are not used)` : ''}`,
  ]);
  const ci =
    e.welch === null
      ? ''
      : ` (${n((e.welch.confidence ?? 1 - e.riskLevel) * 100, 3)}% CI ${n(e.welch.ciLower)} to ${n(e.welch.ciUpper)})`;
  rows.push(['Observed shift', `${n(e.observedShift)} (after − before)${ci}`]);
  if (ref.status === 'ok') {
    const count = ref.countAtLeast;
    rows.push([
      'Reference risk',
      `${count === 0 ? `below ${percent(1 / Math.max(1, ref.m))}` : pct(ref.risk)}: ${n(count)} of ${ref.m} historical differences of the same windows are at least as ${e.direction === 'either' ? 'large' : e.direction === 'rise' ? 'high' : 'low'} (rise ${pct(ref.riskRise)}, fall ${pct(ref.riskFall)}, either ${pct(ref.riskEither)})`,
    ]);
  } else {
    rows.push([
      'Reference risk',
      `not known: the history gives ${ref.m} reference differences, and at least ${ref.minimumM} are needed to resolve a risk level of ${pct(e.riskLevel)}. Use a longer history or shorter windows.`,
    ]);
  }
  if (e.welch !== null) {
    rows.push([
      "Welch's t test",
      `t = ${n(e.welch.t)}, df = ${n(e.welch.df)}, ${e.direction === 'either' ? 'two-sided' : 'one-sided'} ${p(pOf(e.welch, e.direction))}`,
    ]);
  }
  const ac = e.autocorrelation;
  rows.push([
    'Autocorrelation',
    `lag-1 r1 = ${n(ac.r1, 3)} (limit ±${n(ac.limit, 3)})${ac.flagged ? `: ${ac.note}` : ': no sign of dependence between neighbouring samples'}`,
  ]);
  if (e.welchEffective !== null) {
    const w = e.welchEffective;
    rows.push([
      'Welch, effective n',
      `t = ${n(w.t)}, df = ${n(w.df)}, ${p(pOf(w, e.direction))} with effective sizes ${n(w.effectiveBefore, 3)} and ${n(w.effectiveAfter, 3)}`,
    ]);
  }
  rows.push([
    'Baseline',
    `mean ${n(e.baseline.mean)}, sigma ${n(e.baseline.sigma)} (${e.baseline.sigmaMethod})`,
  ]);
  const c = e.cusum;
  const cusumText =
    c.signalAt === null
      ? `no signal (upper ${n(c.upper, 3)}, lower ${n(c.lower, 3)} of h = ${n(c.h)})`
      : `${c.changeSide ?? 'a'} side signalled at after-sample ${c.signalAt}${at(times.cusumSignal)}${c.changePoint === null ? '' : `; shift estimated to start at after-sample ${c.changePoint + 1}${at(times.cusumChangePoint)}, new mean ≈ ${n(c.estimatedMean)}`}`;
  rows.push([`CUSUM (k ${n(c.k)}, h ${n(c.h)})`, cusumText]);
  const w = e.ewma;
  const where =
    w.z === null || w.lower === null || w.upper === null
      ? 'compared with'
      : w.z < w.lower
        ? 'below'
        : w.z > w.upper
          ? 'above'
          : 'back within';
  rows.push([
    `EWMA (λ ${n(w.lambda)}, L ${n(w.L)})`,
    w.signalAt === null
      ? `no signal (z = ${n(w.z)} within ${n(w.lower)} to ${n(w.upper)})`
      : `signalled at after-sample ${w.signalAt}${at(times.ewmaSignal)}; z is now ${n(w.z)}, ${where} ${n(w.lower)} to ${n(w.upper)}`,
  ]);
  if (e.samplesNeeded !== null) {
    rows.push(['Samples still needed', describeProjection(e.samplesNeeded)]);
  }
  if (e.samplesNeededForSmallest !== null) {
    rows.push(['  for smallest shift', describeProjection(e.samplesNeededForSmallest)]);
  }
  rows.push(['Verdict', `${VERDICT_WORDS[e.verdict]}: ${e.verdictText}`]);
  return rows;
}
