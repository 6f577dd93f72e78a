import { parseArgs } from 'node:util';
import { TrueshiftError } from '@trueshift/errors';
import { locateChange, parseHistoryCsv } from '@trueshift/formats';
import type { HistoryTable } from '@trueshift/formats';
import { computeEvidence } from '@trueshift/stats';
import type { Direction, Evidence, EvidenceInput, SigmaMethod } from '@trueshift/stats';
import { CAUTION } from './caution.js';
import { num, percent, pText, table } from './format.js';

export const ANALYSE_HELP = `Usage: trueshift analyse <file.csv> --change <time|row:N> [options]

Reads one tag's history (a header, then time and value per row, in time order) and prints the
evidence that the level changed when the change went live: before and after means, the observed
shift, the risk read off the tag's own reference distribution, Welch's t test, autocorrelation,
CUSUM and EWMA, and how many more samples are needed.

  --change <when>         first sample after the change: a time written like the file's times,
                          or row:N for the N-th sample (required)
  --direction <d>         expected direction: rise, fall or either (default either)
  --risk <level>          the risk of being wrong you accept, 0 < level < 1 (default 0.05)
  --before <n>            before-window n_A (default: as long as the after-window, at least 10)
  --after-cap <n>         use at most n samples after the change
  --smallest-shift <x>    the smallest shift worth having, in the tag's unit
  --sigma <method>        median-moving-range (default), average-moving-range or sample-sd
  --cusum-k <k>           CUSUM reference value in sigma units (default 0.5)
  --cusum-h <h>           CUSUM decision interval in sigma units (default 5)
  --ewma-lambda <l>       EWMA weight (default 0.2)
  --ewma-l <L>            EWMA limit width in sigma units (default 2.962)
  --time-column <name>    the time column (default: found by name)
  --value-column <name>   the value column (default: "value" or the only other column)
  --skip-bad-rows         leave out unreadable rows and list them, instead of stopping
  --json                  print the evidence as JSON
  -h, --help              this text

Exit codes: 0 evidence printed, 2 bad arguments, 3 unreadable or unsuitable file, 1 unexpected error.`;

export interface AnalyseReport {
  file: string;
  tag: string;
  timeColumn: string;
  timeKind: HistoryTable['timeKind'];
  samples: number;
  skippedRows: HistoryTable['skipped'];
  change: { index: number; time: string; line: number };
  /** File times of the CUSUM and EWMA signals and the estimated change point, when there are any. */
  times: { cusumSignal: string | null; cusumChangePoint: string | null; ewmaSignal: string | null };
  evidence: Evidence;
  caution: string;
}

const DIRECTIONS: readonly Direction[] = ['rise', 'fall', 'either'];
const SIGMA_METHODS: readonly SigmaMethod[] = [
  'median-moving-range',
  'average-moving-range',
  'sample-sd',
];

function numberOption(
  value: string | undefined,
  name: string,
  check: (x: number) => boolean,
  rule: string,
): number | undefined {
  if (value === undefined) return undefined;
  const parsed = Number(value);
  if (value.trim() === '' || !Number.isFinite(parsed) || !check(parsed)) {
    throw new TrueshiftError('INVALID_ARGUMENT', `--${name} must be ${rule}; got "${value}".`);
  }
  return parsed;
}

const positiveInteger = (x: number): boolean => Number.isInteger(x) && x >= 1;
const positive = (x: number): boolean => x > 0;

export interface AnalyseRequest {
  file: string;
  json: boolean;
  change: string;
  parse: { timeColumn?: string; valueColumn?: string; skipBadRows: boolean };
  settings: Omit<EvidenceInput, 'history' | 'after'>;
}

export function parseAnalyseArgs(argv: string[]): AnalyseRequest | 'help' {
  const { values, positionals } = parseArgs({
    args: argv,
    allowPositionals: true,
    strict: true,
    options: {
      change: { type: 'string' },
      direction: { type: 'string' },
      risk: { type: 'string' },
      before: { type: 'string' },
      'after-cap': { type: 'string' },
      'smallest-shift': { type: 'string' },
      sigma: { type: 'string' },
      'cusum-k': { type: 'string' },
      'cusum-h': { type: 'string' },
      'ewma-lambda': { type: 'string' },
      'ewma-l': { type: 'string' },
      'time-column': { type: 'string' },
      'value-column': { type: 'string' },
      'skip-bad-rows': { type: 'boolean' },
      json: { type: 'boolean' },
      help: { type: 'boolean', short: 'h' },
    },
  });
  if (values.help === true) return 'help';
  const [file, ...extra] = positionals;
  if (file === undefined) throw new TrueshiftError('INVALID_ARGUMENT', 'Name the CSV file.');
  if (extra.length > 0) {
    throw new TrueshiftError('INVALID_ARGUMENT', `Unexpected argument "${extra.join(' ')}".`);
  }
  if (values.change === undefined) {
    throw new TrueshiftError('INVALID_ARGUMENT', '--change is required: a time or row:N.');
  }
  const direction = (values.direction ?? 'either') as Direction;
  if (!DIRECTIONS.includes(direction)) {
    throw new TrueshiftError('INVALID_ARGUMENT', '--direction must be rise, fall or either.');
  }
  const sigmaMethod = (values.sigma ?? 'median-moving-range') as SigmaMethod;
  if (!SIGMA_METHODS.includes(sigmaMethod)) {
    throw new TrueshiftError('INVALID_ARGUMENT', `--sigma must be ${SIGMA_METHODS.join(', ')}.`);
  }
  const riskLevel =
    numberOption(values.risk, 'risk', (x) => x > 0 && x < 1, 'between 0 and 1') ?? 0.05;
  const settings: AnalyseRequest['settings'] = { direction, riskLevel, sigmaMethod };
  const nBefore = numberOption(values.before, 'before', positiveInteger, 'a whole number ≥ 1');
  if (nBefore !== undefined) settings.nBefore = nBefore;
  const cap = numberOption(values['after-cap'], 'after-cap', positiveInteger, 'a whole number ≥ 1');
  if (cap !== undefined) settings.nAfterCap = cap;
  const smallest = numberOption(values['smallest-shift'], 'smallest-shift', positive, 'above 0');
  if (smallest !== undefined) settings.smallestShift = smallest;
  const k = numberOption(values['cusum-k'], 'cusum-k', (x) => x >= 0, 'zero or more');
  const h = numberOption(values['cusum-h'], 'cusum-h', positive, 'above 0');
  if (k !== undefined || h !== undefined) settings.cusum = { k: k ?? 0.5, h: h ?? 5 };
  const lambda = numberOption(
    values['ewma-lambda'],
    'ewma-lambda',
    (x) => x > 0 && x <= 1,
    'in (0, 1]',
  );
  const L = numberOption(values['ewma-l'], 'ewma-l', positive, 'above 0');
  if (lambda !== undefined || L !== undefined) {
    settings.ewma = { lambda: lambda ?? 0.2, L: L ?? 2.962 };
  }
  const parse: AnalyseRequest['parse'] = { skipBadRows: values['skip-bad-rows'] === true };
  if (values['time-column'] !== undefined) parse.timeColumn = values['time-column'];
  if (values['value-column'] !== undefined) parse.valueColumn = values['value-column'];
  return { file, json: values.json === true, change: values.change, parse, settings };
}

/** The evidence for one file, from its text: pure, so tests and the demo can call it directly. */
export function analyseText(text: string, file: string, request: AnalyseRequest): AnalyseReport {
  const history = parseHistoryCsv(text, request.parse);
  const changeIndex = locateChange(history, request.change);
  const evidence = computeEvidence({
    ...request.settings,
    history: history.values.subarray(0, changeIndex),
    after: history.values.subarray(changeIndex),
  });
  const timeOfAfter = (sample: number | null | undefined): string | null =>
    sample === null || sample === undefined
      ? null
      : (history.times[changeIndex + sample - 1] ?? null);
  return {
    file,
    tag: history.valueColumn,
    timeColumn: history.timeColumn,
    timeKind: history.timeKind,
    samples: history.values.length,
    skippedRows: history.skipped,
    change: {
      index: changeIndex,
      time: history.times[changeIndex] ?? '',
      line: history.lines[changeIndex] ?? 0,
    },
    times: {
      cusumSignal: timeOfAfter(evidence.cusum.signalAt),
      // The change point is the last sample where the sum was zero; the shift starts after it.
      cusumChangePoint: timeOfAfter(
        evidence.cusum.change === null ? null : evidence.cusum.change.changePoint + 1,
      ),
      ewmaSignal: timeOfAfter(evidence.ewma.signalAt),
    },
    evidence,
    caution: CAUTION,
  };
}

const VERDICT_WORDS: Record<Evidence['verdict'], string> = {
  'not-enough-history': 'NOT ENOUGH HISTORY',
  'still-gathering': 'STILL GATHERING',
  'credible-rise': 'CREDIBLE RISE',
  'credible-fall': 'CREDIBLE FALL',
  'credible-but-small': 'CREDIBLE BUT SMALLER THAN WORTH HAVING',
  'no-credible-shift': 'NO CREDIBLE SHIFT',
};

function describeProjection(projection: Evidence['samplesNeeded']): string {
  switch (projection.status) {
    case 'reached':
      return `none: ${projection.nAfter} after-samples are enough for this shift`;
    case 'reachable':
      return `${projection.more} more (an after-window of ${projection.nAfter})`;
    case 'not-reachable':
      return `not reachable with this history: ${projection.reason}`;
  }
}

export function renderReport(report: AnalyseReport): string {
  const e = report.evidence;
  const ref = e.reference;
  const rows: [string, string][] = [];
  rows.push([
    'Before the change',
    `last ${e.nBefore} of ${e.nHistory} history samples: mean ${num(e.before.mean)}, SD ${num(e.before.sd)}`,
  ]);
  rows.push([
    'After the change',
    `first ${e.nAfter} samples: mean ${num(e.after.mean)}, SD ${num(e.after.sd)}${e.nAfterUnused > 0 ? ` (${e.nAfterUnused} later samples beyond the cap are not used)` : ''}`,
  ]);
  const ci =
    e.welch === null
      ? ''
      : ` (${num(e.welch.confidence * 100, 3)}% CI ${num(e.welch.ci.lower)} to ${num(e.welch.ci.upper)})`;
  rows.push(['Observed shift', `${num(e.observedShift)} (after − before)${ci}`]);
  if (ref.status === 'ok') {
    rows.push([
      'Reference risk',
      `${ref.countAtLeast === 0 ? `below ${percent(1 / ref.m)}` : percent(ref.risk)}: ${ref.countAtLeast} of ${ref.m} historical differences of the same windows are at least as ${e.direction === 'either' ? 'large' : e.direction === 'rise' ? 'high' : 'low'} (rise ${percent(ref.riskRise)}, fall ${percent(ref.riskFall)}, either ${percent(ref.riskEither)})`,
    ]);
  } else {
    rows.push(['Reference risk', ref.message]);
  }
  if (e.welch !== null) {
    const p =
      e.direction === 'rise'
        ? e.welch.pRise
        : e.direction === 'fall'
          ? e.welch.pFall
          : e.welch.pTwoSided;
    rows.push([
      "Welch's t test",
      `t = ${num(e.welch.t)}, df = ${num(e.welch.df)}, ${e.direction === 'either' ? 'two-sided' : 'one-sided'} ${pText(p)}`,
    ]);
  }
  const ac = e.autocorrelation;
  rows.push([
    'Autocorrelation',
    `lag-1 r1 = ${num(ac.r1, 3)} (limit ±${num(ac.limit, 3)})${ac.flagged ? `: ${ac.note}` : ': no sign of dependence between neighbouring samples'}`,
  ]);
  if (e.welchEffective !== null) {
    const w = e.welchEffective;
    const p = e.direction === 'rise' ? w.pRise : e.direction === 'fall' ? w.pFall : w.pTwoSided;
    rows.push([
      'Welch, effective n',
      `t = ${num(w.t)}, df = ${num(w.df)}, ${pText(p)} with effective sizes ${num(w.effectiveSizes?.before ?? Number.NaN, 3)} and ${num(w.effectiveSizes?.after ?? Number.NaN, 3)}`,
    ]);
  }
  rows.push([
    'Baseline',
    `mean ${num(e.baseline.mean)}, sigma ${num(e.baseline.sigma)} (${e.baseline.sigmaMethod}); SD ${num(e.baseline.sampleSd)}`,
  ]);
  const cusumText =
    e.cusum.signalAt === null
      ? `no signal (upper ${num(e.cusum.upper, 3)}, lower ${num(e.cusum.lower, 3)} of h = ${num(e.cusum.h)})`
      : `${e.cusum.signal ?? 'a'} side signalled at after-sample ${e.cusum.signalAt}${report.times.cusumSignal === null ? '' : ` (${report.times.cusumSignal})`}${e.cusum.change === null ? '' : `; shift estimated to start at after-sample ${e.cusum.change.changePoint + 1}${report.times.cusumChangePoint === null ? '' : ` (${report.times.cusumChangePoint})`}, new mean ≈ ${num(e.cusum.change.estimatedMean)}`}`;
  rows.push([`CUSUM (k ${num(e.cusum.k)}, h ${num(e.cusum.h)})`, cusumText]);
  rows.push([
    `EWMA (λ ${num(e.ewma.lambda)}, L ${num(e.ewma.L)})`,
    e.ewma.signalAt === null
      ? `no signal (z = ${num(e.ewma.z)} within ${num(e.ewma.lower)} to ${num(e.ewma.upper)})`
      : `signalled at after-sample ${e.ewma.signalAt}${report.times.ewmaSignal === null ? '' : ` (${report.times.ewmaSignal})`}; z is now ${num(e.ewma.z)}, ${e.ewma.signal === null ? 'back within' : e.ewma.signal === 'lower' ? 'below' : 'above'} ${num(e.ewma.lower)} to ${num(e.ewma.upper)}`,
  ]);
  rows.push(['Samples still needed', describeProjection(e.samplesNeeded)]);
  if (e.samplesNeededForSmallest !== null) {
    rows.push(['  for smallest shift', describeProjection(e.samplesNeededForSmallest)]);
  }
  rows.push(['Verdict', `${VERDICT_WORDS[e.verdict]}: ${e.verdictText}`]);

  const header = [
    `trueshift evidence for "${report.tag}" in ${report.file}`,
    `${report.samples} samples; change at ${report.change.time} (line ${report.change.line}); expected direction ${e.direction}; risk level ${percent(e.riskLevel)}`,
  ];
  if (report.skippedRows.length > 0) {
    header.push(
      `${report.skippedRows.length} unreadable rows left out, first at line ${report.skippedRows[0]?.line ?? 0}: ${report.skippedRows[0]?.reason ?? ''}`,
    );
  }
  return `${header.join('\n')}\n\n${table(rows)}\n\n${report.caution}\n`;
}
