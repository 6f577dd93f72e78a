import { TrueshiftError } from '@trueshift/errors';
import { importCsvFile } from '@trueshift/ingest';
import type { CsvImportResult } from '@trueshift/ingest';
import { onePositional, parseCommand, showHelp } from '../command-args.js';
import { grouped, table } from '../format.js';
import { EXIT } from '../io.js';
import type { CliIo, ExitCode } from '../io.js';
import { createProgressBar } from '../progress.js';
import { STORE_NOTE, withStore } from '../store-access.js';

export const IMPORT_HELP = `Usage: trueshift import <file.csv> [--config <file>] [--name <name>] [--again] [--json]

Reads a history file into the store, as the drop folder would: long layout (time, tag, value
[, quality] per row) or wide layout (time, then one column per tag). Good rows are stored; a row
that cannot be read is quarantined with its line and the reason, and the rest go on. The same
content is taken once; --again imports it once more (to finish an import that was cut short).
A progress bar (rows, share of the file read, rows per second) is drawn on stderr when it is a
terminal.

  --config <file>   the configuration naming the store (default: as "trueshift start" finds it)
  --name <name>     the name the file is recorded under (default: its own name)
  --again           import even when this content was taken before
  --json            print the result as JSON
  -h, --help        this text

${STORE_NOTE}

Exit codes: 0 every row stored (or the content was taken before), 2 bad arguments, 3 the file was
refused (no usable header, nothing in it, unreadable) or some rows were rejected (the good rows are
stored), 1 unexpected error.`;

/** How many of the first rejections the summary lists; the quarantine keeps them all. */
const REASONS_SHOWN = 10;

function summary(result: CsvImportResult, seconds: number): string {
  const rows: [string, string][] = [
    ['Stored', `${grouped(result.stored)} samples`],
    [
      'Duplicates',
      `${grouped(result.duplicates)} (already stored with the same value; nothing done)`,
    ],
    [
      'Conflicts',
      `${grouped(result.conflicts)}${result.conflicts > 0 ? ' (another value was stored for that tag and time: it is kept, the new one quarantined)' : ''}`,
    ],
    [
      'Quarantined',
      `${grouped(result.quarantined)} rejections on ${grouped(result.rejectedLines)} of ${grouped(result.rows)} lines`,
    ],
  ];
  const lines = [
    `Imported ${result.file} (${result.layout ?? 'unknown'} layout): ${grouped(result.rows)} rows in ${seconds.toFixed(1)} s.`,
    table(rows),
  ];
  if (result.firstRejections.length > 0) {
    lines.push('', 'First reasons:');
    for (const rejection of result.firstRejections.slice(0, REASONS_SHOWN)) {
      lines.push(`  line ${rejection.line}: ${rejection.reason} [${rejection.code}]`);
    }
    if (result.rejectedLines > REASONS_SHOWN) {
      lines.push(
        `  … and ${result.rejectedLines - REASONS_SHOWN} more lines; the quarantine keeps every rejection.`,
      );
    }
  }
  return `${lines.join('\n')}\n`;
}

export async function importCommand(
  argv: string[],
  io: CliIo,
  clock: () => number,
): Promise<ExitCode> {
  const args = parseCommand(argv, {
    allowPositionals: true,
    options: {
      config: { type: 'string' },
      name: { type: 'string' },
      again: { type: 'boolean' },
      json: { type: 'boolean' },
    },
  });
  if (args === 'help') return showHelp(io, IMPORT_HELP);
  const { values, positionals } = args;
  const file = onePositional(positionals, 'the CSV file to import');
  const name = values.name?.trim();
  if (name === '') throw new TrueshiftError('INVALID_ARGUMENT', '--name must not be empty.');

  return withStore(values.config, { create: true }, async (store, config) => {
    const started = clock();
    const bar = io.stderrIsTerminal === true ? createProgressBar(io.stderr, clock) : null;
    let result: CsvImportResult;
    try {
      result = await importCsvFile(file, {
        store,
        clock,
        options: {
          maxFutureMs: config.ingest.maxFutureMs,
          ...(name === undefined ? {} : { name }),
          ...(values.again === true ? { again: true } : {}),
          ...(bar === null
            ? {}
            : {
                onProgress: (progress) => {
                  bar.update(progress);
                },
              }),
        },
      });
    } catch (error) {
      const code = (error as { code?: unknown }).code;
      if (code === 'ENOENT' || code === 'EISDIR' || code === 'EACCES') {
        throw new TrueshiftError('FILE_NOT_FOUND', `"${file}": ${(error as Error).message}`, {
          cause: error,
        });
      }
      throw error;
    } finally {
      bar?.finish();
    }
    if (values.json === true) io.stdout(`${JSON.stringify(result, null, 2)}\n`);
    if (result.alreadyTaken) {
      if (values.json !== true) {
        io.stdout(
          `${file} was imported before (the same content, sha256 ${result.hash.slice(0, 12)}…): nothing to do. Add --again to import it once more.\n`,
        );
      }
      return EXIT.ok;
    }
    if (result.fileError !== null) {
      const e = result.fileError;
      io.stderr(`trueshift: ${e.code}: ${file} is refused: line ${e.line}: ${e.reason}\n`);
      return EXIT.badInput;
    }
    if (values.json !== true) io.stdout(summary(result, (clock() - started) / 1000));
    const first = result.firstRejections[0];
    if (first !== undefined) {
      io.stderr(
        `trueshift: ${first.code}: ${result.rejectedLines} of ${result.rows} lines were rejected and quarantined; the first, line ${first.line}: ${first.reason}\n`,
      );
      return EXIT.badInput;
    }
    return EXIT.ok;
  });
}
