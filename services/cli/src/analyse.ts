import { TrueshiftError } from '@trueshift/errors';
import { locateChange, parseHistoryCsv } from '@trueshift/formats';
import type { HistoryTable } from '@trueshift/formats';
import { readEvidence } from '@trueshift/report';
import { computeEvidence } from '@trueshift/stats';
import type { Direction, Evidence, EvidenceInput, SigmaMethod } from '@trueshift/stats';
import { CAUTION } from './caution.js';
import { noMoreArguments, parseCommand } from './command-args.js';
import { evidenceRows, signalTimes } from './evidence-rows.js';
import type { SignalTimes } from './evidence-rows.js';
import { percent, table } from './format.js';
import { numberOption, positive, positiveInteger, riskLevel as isRiskLevel } from './options.js';

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
  times: SignalTimes;
  evidence: Evidence;
  caution: string;
}

const DIRECTIONS: readonly Direction[] = ['rise', 'fall', 'either'];
const SIGMA_METHODS: readonly SigmaMethod[] = [
  'median-moving-range',
  'average-moving-range',
  'sample-sd',
];

export interface AnalyseRequest {
  file: string;
  json: boolean;
  change: string;
  parse: { timeColumn?: string; valueColumn?: string; skipBadRows: boolean };
  settings: Omit<EvidenceInput, 'history' | 'after'>;
}

export function parseAnalyseArgs(argv: string[]): AnalyseRequest | 'help' {
  const args = parseCommand(argv, {
    allowPositionals: true,
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
    },
  });
  if (args === 'help') return 'help';
  const { values, positionals } = args;
  const [file, ...extra] = positionals;
  if (file === undefined) throw new TrueshiftError('INVALID_ARGUMENT', 'Name the CSV file.');
  noMoreArguments(extra);
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
  const riskLevel = numberOption(values.risk, 'risk', isRiskLevel, 'between 0 and 1') ?? 0.05;
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
  const times = signalTimes(
    readEvidence(evidence),
    (sample) => history.times[changeIndex + sample - 1] ?? null,
  );
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
    times,
    evidence,
    caution: CAUTION,
  };
}

export function renderReport(report: AnalyseReport): string {
  const e = report.evidence;
  const view = readEvidence(e);
  const rows: [string, string][] =
    view === null ? [['Verdict', e.verdictText]] : evidenceRows(view, report.times);
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
