import { CAUTION } from '@trueshift/config';
import { TrueshiftError } from '@trueshift/errors';
import { noMoreArguments, parseCommand, showHelp } from '../command-args.js';
import { EXIT } from '../io.js';
import type { CliIo, ExitCode } from '../io.js';
import { STORE_NOTE, withStore } from '../store-access.js';

export const REPORT_HELP = `Usage: trueshift report <mark-id> <tag> [--out <file.html>] [--config <file>]

Exports the decision report of a mark on one of its tags: one self-contained, print-ready HTML file
(no script, nothing fetched from elsewhere) with the question, the data window, every figure, the
numbers, the methods and their assumptions, and the caution. It is the same report the page
offers. Without --out the HTML goes to stdout.

  --out <file.html>   write the report to this file
  --config <file>     the configuration naming the store
  -h, --help          this text

${STORE_NOTE}

Exit codes: 0 exported, 2 bad arguments, 3 bad configuration or store, or the file cannot be
written, 4 no such mark or tag, the mark does not cover the tag, or no evidence yet, 1 unexpected
error.`;

export async function reportCommand(
  argv: string[],
  io: CliIo,
  clock: () => number,
): Promise<ExitCode> {
  const args = parseCommand(argv, {
    allowPositionals: true,
    options: {
      out: { type: 'string' },
      config: { type: 'string' },
    },
  });
  if (args === 'help') return showHelp(io, REPORT_HELP);
  const { values, positionals } = args;
  const [markId, tag, ...extra] = positionals;
  if (markId === undefined || tag === undefined) {
    throw new TrueshiftError(
      'INVALID_ARGUMENT',
      'Name the mark and the tag: report <mark-id> <tag>.',
    );
  }
  noMoreArguments(extra);
  const out = values.out;
  if (out?.trim() === '') throw new TrueshiftError('INVALID_ARGUMENT', '--out needs a file name.');
  return withStore(values.config, { create: false }, async (store) => {
    const { buildDecisionReport } = await import('@trueshift/report');
    const { loadFigures } = await import('@trueshift/web');
    // The page's report route feeds the builder exactly so: the same figures, the same caution.
    const figures = await loadFigures(store, markId, tag);
    const html = buildDecisionReport(figures, { caution: CAUTION, generatedAt: clock() });
    if (out === undefined) {
      io.stdout(html);
      return EXIT.ok;
    }
    try {
      await io.writeText(out, html);
    } catch (error) {
      throw new TrueshiftError(
        'FILE_NOT_FOUND',
        `Cannot write "${out}": ${(error as Error).message}`,
        {
          cause: error,
        },
      );
    }
    io.stdout(
      `Wrote the decision report for ${figures.tag.name} after "${figures.mark.label}" to ${out} (${Math.ceil(Buffer.byteLength(html) / 1024)} kB): ${figures.verdictTitle}.\n\n${CAUTION}\n`,
    );
    return EXIT.ok;
  });
}
