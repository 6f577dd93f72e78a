import { periodMeans, resolveTagSettings } from '@trueshift/analyser';
import { CAUTION } from '@trueshift/config';
import { TrueshiftError } from '@trueshift/errors';
import { readEvidence } from '@trueshift/report';
import type { EvidenceSnapshot, MarkRecord, Store, TagRecord } from '@trueshift/store';
import { onePositional, parseCommand, showHelp } from '../command-args.js';
import { evidenceRows, signalTimes, VERDICT_WORDS } from '../evidence-rows.js';
import { percent, table } from '../format.js';
import { EXIT } from '../io.js';
import type { CliIo, ExitCode } from '../io.js';
import { STORE_NOTE, withStore } from '../store-access.js';

export const EVIDENCE_HELP = `Usage: trueshift evidence <tag> [--mark <id>] [--json] [--config <file>]

Prints the latest evidence the analyser gathered for each active mark on the tag (or for the one
mark named): before and after means, the observed shift, the reference risk from the tag's own
history, Welch's t test, autocorrelation, CUSUM and EWMA, the samples still needed and the verdict.

  --mark <id>       only this mark (withdrawn ones too)
  --json            the marks and their latest evidence snapshots as JSON
  --config <file>   the configuration naming the store
  -h, --help        this text

${STORE_NOTE}

Exit codes: 0 evidence printed, 2 bad arguments, 3 bad configuration or store, 4 no such tag or
mark, or no evidence yet (no active mark, or no sample after it analysed), 1 unexpected error.`;

interface MarkEvidence {
  mark: MarkRecord;
  evidence: EvidenceSnapshot | null;
}

const iso = (t: number): string => new Date(t).toISOString();

function field(body: unknown, ...path: string[]): unknown {
  let current = body;
  for (const key of path) {
    if (typeof current !== 'object' || current === null) return undefined;
    current = (current as Record<string, unknown>)[key];
  }
  return current;
}

/**
 * The times of the after-window's values, as the analyser built them: each good sample of a batch
 * tag, or the start of each period of a continuous one (periods anchored at the mark).
 */
async function afterTimes(
  store: Store,
  tag: TagRecord,
  mark: MarkRecord,
  snapshot: EvidenceSnapshot,
): Promise<readonly number[]> {
  // Only kind and period matter, and the service's defaults never set those.
  const settings = resolveTagSettings(tag.settings);
  const continuous = settings.kind === 'continuous';
  const samples = await store.readSamples(tag.name, {
    from: mark.at,
    to: snapshot.sampleTime + (continuous ? settings.periodMs : 1),
    goodOnly: true,
  });
  if (!continuous) return Array.from(samples.t);
  return Array.from(periodMeans(samples.t, samples.value, settings.periodMs, mark.at).start);
}

async function renderOne(store: Store, tag: TagRecord, item: MarkEvidence): Promise<string> {
  const { mark, evidence: snapshot } = item;
  const lines = [
    `Mark ${mark.id}: "${mark.label}" at ${iso(mark.at)}, expected direction ${mark.direction}${mark.withdrawnAt === null ? '' : ` (withdrawn ${iso(mark.withdrawnAt)})`}`,
  ];
  if (snapshot === null) {
    lines.push('No evaluation yet: no sample after the mark has been analysed.');
    return lines.join('\n');
  }
  const view = readEvidence(snapshot.body);
  const basis = field(snapshot.body, 'basis');
  const settled = field(snapshot.body, 'evaluation', 'settled');
  lines.push(
    `Evaluated ${iso(snapshot.evaluatedAt)} over ${snapshot.nAfter} values after the mark${typeof basis === 'string' ? ` (${basis})` : ''}, the latest at ${iso(snapshot.sampleTime)}${settled === 'alert' ? '; settled: an alert opened' : settled === 'cap' ? '; settled: the after-window is full' : ''}.`,
  );
  if (view === null) {
    lines.push(
      '',
      table([
        [
          'Verdict',
          `${VERDICT_WORDS['not-enough-history']}: the history before the mark is too short to judge.`,
        ],
      ]),
    );
    return lines.join('\n');
  }
  const times = await afterTimes(store, tag, mark, snapshot);
  const rows = evidenceRows(
    view,
    signalTimes(view, (sample) => {
      const t = times[sample - 1];
      return t === undefined ? null : iso(t);
    }),
  );
  lines.push(
    `${view.nHistory} history values; risk level ${percent(view.riskLevel)}.`,
    '',
    table(rows),
  );
  return lines.join('\n');
}

export async function evidenceCommand(argv: string[], io: CliIo): Promise<ExitCode> {
  const args = parseCommand(argv, {
    allowPositionals: true,
    options: {
      mark: { type: 'string' },
      json: { type: 'boolean' },
      config: { type: 'string' },
    },
  });
  if (args === 'help') return showHelp(io, EVIDENCE_HELP);
  const { values, positionals } = args;
  const tagName = onePositional(positionals, 'the tag');
  return withStore(values.config, { create: false }, async (store) => {
    const tag = await store.getTag(tagName);
    if (tag === null) throw new TrueshiftError('TAG_NOT_FOUND', `Tag ${JSON.stringify(tagName)}.`);
    let marks: MarkRecord[];
    if (values.mark === undefined) {
      marks = await store.listMarks({ tag: tagName });
      if (marks.length === 0) {
        throw new TrueshiftError(
          'EVIDENCE_NOT_FOUND',
          `No active mark on ${JSON.stringify(tagName)}: mark a change with "trueshift mark".`,
        );
      }
    } else {
      const mark = await store.getMark(values.mark);
      if (mark === null) {
        throw new TrueshiftError('MARK_NOT_FOUND', `Mark ${JSON.stringify(values.mark)}.`);
      }
      if (!mark.tags.includes(tagName)) {
        throw new TrueshiftError(
          'EVIDENCE_NOT_FOUND',
          `Mark ${mark.id} does not cover tag ${JSON.stringify(tagName)}.`,
        );
      }
      marks = [mark];
    }
    const items: MarkEvidence[] = [];
    for (const mark of marks) {
      items.push({ mark, evidence: await store.latestEvidence(mark.id, tagName) });
    }
    if (items.every((item) => item.evidence === null)) {
      throw new TrueshiftError(
        'EVIDENCE_NOT_FOUND',
        `No sample after ${items.length === 1 ? 'the mark' : 'any of the marks'} on ${JSON.stringify(tagName)} has been analysed yet (${items.map((item) => item.mark.id).join(', ')}).`,
      );
    }
    if (values.json === true) {
      io.stdout(`${JSON.stringify({ caution: CAUTION, tag, marks: items }, null, 2)}\n`);
      return EXIT.ok;
    }
    const parts = [
      `trueshift evidence for "${tag.name}"${tag.unit === null ? '' : ` (${tag.unit})`}${tag.description === null ? '' : `: ${tag.description}`}`,
    ];
    for (const item of items) parts.push(await renderOne(store, tag, item));
    io.stdout(`${parts.join('\n\n')}\n\n${CAUTION}\n`);
    return EXIT.ok;
  });
}
