import { TrueshiftError } from '@trueshift/errors';
import { tagNameProblem } from '@trueshift/formats';
import type { Direction, MarkInput, MarkRecord, Store } from '@trueshift/store';
import { noMoreArguments, onePositional, parseCommand, showHelp } from '../command-args.js';
import { EXIT } from '../io.js';
import type { CliIo, ExitCode } from '../io.js';
import {
  durationOption,
  maxLength,
  numberOption,
  positive,
  positiveInteger,
  requiredText,
  riskLevel,
  timeOption,
} from '../options.js';
import { STORE_NOTE, withStore } from '../store-access.js';

export const MARK_HELP = `Usage: trueshift mark --tag <tag> [--tag <tag> ...] --label <text> [options]

Marks a plant change (a retuned loop, a new supplier, a new procedure) on the tags it should move.
From then on the analyser gathers the evidence for each tag: the samples after the mark against the
tag's own history before it. Prints the new mark's id on stdout.

  --tag <tag>             a tag the change should move; repeat for more (at least one)
  --label <text>          what changed, in a few words (up to 200 characters)
  --at <time>             when the change went live: ISO 8601 (UTC without a zone) or epoch
                          milliseconds; may lie in the past (default: now)
  --direction <d>         the shift hoped for: rise, fall or either (default either)
  --note <text>           more about the change (up to 4000 characters)
  --smallest-shift <x>    the smallest shift worth having, in the tag's unit
  --before <n>            before-window n_A, fixed at the mark (default: the tag's, else 30)
  --after-cap <n>         judge at most n samples after the change (default: the tag's, else 100)
  --risk <level>          the risk of being wrong you accept, 0 < level < 1 (default: the tag's)
  --settling <duration>   how long the plant takes to settle after the change, e.g. 2h or 30min;
                          samples in it are left out of later marks' history (default none)
  --by <name>             who marks it (default: your user name)
  --config <file>         the configuration naming the store
  --json                  print the whole mark as JSON
  -h, --help              this text

${STORE_NOTE}

Exit codes: 0 marked, 2 bad arguments, 3 bad configuration or store, 4 a tag has no samples in the
store (a misspelt tag would wait for ever), 1 unexpected error.`;

export const WITHDRAW_HELP = `Usage: trueshift withdraw <mark-id> --reason <text> [--by <name>] [--config <file>] [--json]

Withdraws a mark, saying why: the analyser stops judging it, and it stays on record with every
revision it went through.

${STORE_NOTE}

Exit codes: 0 withdrawn, 2 bad arguments, 3 already withdrawn or bad configuration, 4 no such
mark, 1 unexpected error.`;

const DIRECTIONS: readonly Direction[] = ['rise', 'fall', 'either'];

async function requireKnownTags(store: Store, tags: readonly string[]): Promise<void> {
  for (const tag of tags) {
    const problem = tagNameProblem(tag);
    if (problem !== null) throw new TrueshiftError('TAG_NAME_INVALID', problem);
  }
  const found = await Promise.all(tags.map((tag) => store.getTag(tag)));
  const unknown = tags.filter((_, i) => found[i] === null);
  if (unknown.length > 0) {
    throw new TrueshiftError(
      'TAG_NOT_FOUND',
      `No samples were ever stored for ${unknown.map((t) => JSON.stringify(t)).join(', ')}.`,
    );
  }
}

function describeMark(mark: MarkRecord): string {
  return `"${mark.label}" on ${mark.tags.join(', ')} at ${new Date(mark.at).toISOString()} (direction ${mark.direction})`;
}

export async function markCommand(
  argv: string[],
  io: CliIo,
  clock: () => number,
  user: () => string,
): Promise<ExitCode> {
  const args = parseCommand(argv, {
    allowPositionals: true,
    options: {
      tag: { type: 'string', multiple: true },
      label: { type: 'string' },
      at: { type: 'string' },
      direction: { type: 'string' },
      note: { type: 'string' },
      'smallest-shift': { type: 'string' },
      before: { type: 'string' },
      'after-cap': { type: 'string' },
      risk: { type: 'string' },
      settling: { type: 'string' },
      by: { type: 'string' },
      config: { type: 'string' },
      json: { type: 'boolean' },
    },
  });
  if (args === 'help') return showHelp(io, MARK_HELP);
  const { values, positionals } = args;
  noMoreArguments(positionals, '; name tags with --tag');
  const tags = (values.tag ?? []).map((tag) => tag.trim());
  if (tags.length === 0) {
    throw new TrueshiftError('INVALID_ARGUMENT', '--tag is required: the tags the change moves.');
  }
  if (new Set(tags).size !== tags.length) {
    throw new TrueshiftError('INVALID_ARGUMENT', 'Name each --tag once.');
  }
  const label = maxLength(requiredText(values.label, 'label', 'what changed'), 'label', 200);
  const direction = (values.direction ?? 'either') as Direction;
  if (!DIRECTIONS.includes(direction)) {
    throw new TrueshiftError('INVALID_ARGUMENT', '--direction must be rise, fall or either.');
  }
  const input: MarkInput = {
    tags,
    at: values.at === undefined ? clock() : timeOption(values.at, 'at'),
    label,
    direction,
  };
  if (values.note !== undefined) input.note = maxLength(values.note, 'note', 4000);
  const smallest = numberOption(values['smallest-shift'], 'smallest-shift', positive, 'above 0');
  if (smallest !== undefined) input.smallestShift = smallest;
  const atLeastTwo = (x: number): boolean => Number.isInteger(x) && x >= 2;
  const before = numberOption(values.before, 'before', atLeastTwo, 'a whole number ≥ 2');
  if (before !== undefined) input.nBefore = before;
  const cap = numberOption(values['after-cap'], 'after-cap', positiveInteger, 'a whole number ≥ 1');
  if (cap !== undefined) input.nAfterCap = cap;
  const risk = numberOption(values.risk, 'risk', riskLevel, 'between 0 and 1');
  if (risk !== undefined) input.riskLevel = risk;
  if (values.settling !== undefined) input.settlingMs = durationOption(values.settling, 'settling');
  const by = values.by === undefined ? user() : requiredText(values.by, 'by', 'who marks it');

  return withStore(values.config, { create: false }, async (store) => {
    await requireKnownTags(store, tags);
    const mark = await store.createMark(input, by, clock());
    if (values.json === true) {
      io.stdout(`${JSON.stringify(mark, null, 2)}\n`);
    } else {
      io.stdout(`${mark.id}\n`);
      io.stderr(`Marked ${describeMark(mark)} by ${by}.\n`);
    }
    return EXIT.ok;
  });
}

export async function withdrawCommand(
  argv: string[],
  io: CliIo,
  clock: () => number,
  user: () => string,
): Promise<ExitCode> {
  const args = parseCommand(argv, {
    allowPositionals: true,
    options: {
      reason: { type: 'string' },
      by: { type: 'string' },
      config: { type: 'string' },
      json: { type: 'boolean' },
    },
  });
  if (args === 'help') return showHelp(io, WITHDRAW_HELP);
  const { values, positionals } = args;
  const id = onePositional(positionals, 'the mark to withdraw');
  const reason = maxLength(requiredText(values.reason, 'reason', 'why'), 'reason', 2000);
  const by = values.by === undefined ? user() : requiredText(values.by, 'by', 'who withdraws it');
  return withStore(values.config, { create: false }, async (store) => {
    const mark = await store.withdrawMark(id, by, reason, clock());
    io.stdout(
      values.json === true
        ? `${JSON.stringify(mark, null, 2)}\n`
        : `Withdrew mark ${mark.id}, ${describeMark(mark)}: ${reason}\n`,
    );
    return EXIT.ok;
  });
}
