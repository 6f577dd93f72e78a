import { mkdir, readFile, writeFile } from 'node:fs/promises';
import { join, resolve } from 'node:path';
import { parseArgs } from 'node:util';
import { isTrueshiftError, TrueshiftError } from '@trueshift/errors';
import { analyseText, ANALYSE_HELP, parseAnalyseArgs, renderReport } from './analyse.js';
import { demoPlant } from './demo-plant.js';

/** What the command line touches, passed in so tests can run it without a process of its own. */
export interface CliIo {
  stdout: (text: string) => void;
  stderr: (text: string) => void;
  readText: (path: string) => Promise<string>;
  writeText: (path: string, text: string) => Promise<void>;
}

export const processIo: CliIo = {
  stdout: (text) => process.stdout.write(text),
  stderr: (text) => process.stderr.write(text),
  readText: (path) => readFile(path, 'utf8'),
  writeText: async (path, text) => {
    await mkdir(resolve(path, '..'), { recursive: true });
    await writeFile(path, text, 'utf8');
  },
};

/** Exit codes scripts can rely on. */
export const EXIT = { ok: 0, unexpected: 1, usage: 2, badInput: 3 } as const;

const HELP = `Usage: trueshift <command> [options]

Commands:
  analyse <file.csv> --change <when>   the evidence for one tag's change, from a history file
  demo [--out <dir>]                   write the demo plant's history files and analyse them
  help [command]                       this text, or a command's own

Run "trueshift <command> --help" for a command's options.`;

const DEMO_HELP = `Usage: trueshift demo [--out <dir>] [--json]

Writes the history files of the demo plant (an invented dairy evaporator: one tag whose level
really fell after a new cleaning sequence, one whose level did not move) into <dir>
(default ./data/demo) and prints the evidence for each.`;

async function analyse(argv: string[], io: CliIo): Promise<number> {
  const request = parseAnalyseArgs(argv);
  if (request === 'help') {
    io.stdout(`${ANALYSE_HELP}\n`);
    return EXIT.ok;
  }
  let text: string;
  try {
    text = await io.readText(request.file);
  } catch (error) {
    throw new TrueshiftError('FILE_NOT_FOUND', `"${request.file}": ${(error as Error).message}`, {
      cause: error,
    });
  }
  const report = analyseText(text, request.file, request);
  io.stdout(request.json ? `${JSON.stringify(report, null, 2)}\n` : renderReport(report));
  return EXIT.ok;
}

async function demo(argv: string[], io: CliIo): Promise<number> {
  const { values } = parseArgs({
    args: argv,
    strict: true,
    options: {
      out: { type: 'string' },
      json: { type: 'boolean' },
      help: { type: 'boolean', short: 'h' },
    },
  });
  if (values.help === true) {
    io.stdout(`${DEMO_HELP}\n`);
    return EXIT.ok;
  }
  const out = values.out ?? join('data', 'demo');
  const reports = [];
  for (const tag of demoPlant()) {
    const path = join(out, tag.file);
    await io.writeText(path, tag.csv);
    const report = analyseText(tag.csv, path, {
      file: path,
      json: values.json === true,
      change: tag.changeTime,
      parse: { skipBadRows: false },
      settings: { direction: tag.direction, riskLevel: 0.05, nBefore: tag.nBefore },
    });
    reports.push(report);
    if (values.json !== true) {
      io.stdout(`${tag.description} (${tag.unit}). In the simulation: ${tag.truth}.\n`);
      io.stdout(`${renderReport(report)}\n`);
      io.stdout(
        `Try it yourself: trueshift analyse ${path} --change ${tag.changeTime} --direction ${tag.direction} --before ${tag.nBefore}\n\n`,
      );
    }
  }
  if (values.json === true) io.stdout(`${JSON.stringify(reports, null, 2)}\n`);
  return EXIT.ok;
}

export async function runCli(argv: string[], io: CliIo = processIo): Promise<number> {
  const [command, ...rest] = argv;
  try {
    switch (command) {
      case 'analyse':
      case 'analyze':
        return await analyse(rest, io);
      case 'demo':
        return await demo(rest, io);
      case undefined:
      case 'help':
      case '--help':
      case '-h':
        io.stdout(
          `${rest[0] === 'analyse' ? ANALYSE_HELP : rest[0] === 'demo' ? DEMO_HELP : HELP}\n`,
        );
        return EXIT.ok;
      default:
        io.stderr(`trueshift: unknown command "${command}".\n\n${HELP}\n`);
        return EXIT.usage;
    }
  } catch (error) {
    if (isTrueshiftError(error)) {
      io.stderr(`trueshift: ${error.code}: ${error.message}\n`);
      return error.code === 'INVALID_ARGUMENT' ? EXIT.usage : EXIT.badInput;
    }
    // node:util parseArgs reports unknown or malformed options with these codes.
    const code = (error as { code?: unknown }).code;
    if (typeof code === 'string' && code.startsWith('ERR_PARSE_ARGS')) {
      io.stderr(`trueshift: INVALID_ARGUMENT: ${(error as Error).message}\n`);
      return EXIT.usage;
    }
    io.stderr(
      `trueshift: INTERNAL: ${error instanceof Error ? (error.stack ?? error.message) : String(error)}\n`,
    );
    return EXIT.unexpected;
  }
}
