import { userInfo } from 'node:os';
import { isTrueshiftError, TrueshiftError } from '@trueshift/errors';
import { analyseText, ANALYSE_HELP, parseAnalyseArgs, renderReport } from './analyse.js';
import { ACK_HELP, ackCommand, ALERTS_HELP, alertsCommand } from './commands/alerts.js';
import { DEMO_HELP, demoCommand } from './commands/demo.js';
import { EVIDENCE_HELP, evidenceCommand } from './commands/evidence.js';
import { IMPORT_HELP, importCommand } from './commands/import.js';
import { MARK_HELP, markCommand, WITHDRAW_HELP, withdrawCommand } from './commands/marks.js';
import { REPORT_HELP, reportCommand } from './commands/report.js';
import {
  CHECK_HELP,
  checkCommand,
  processStopSignal,
  START_HELP,
  startCommand,
  TOKEN_HELP,
  tokenCommand,
} from './commands/service.js';
import type { StopSignal } from './commands/service.js';
import { showHelp } from './command-args.js';
import { EXIT, exitCodeOf, processIo } from './io.js';
import type { CliIo, ExitCode } from './io.js';

const HELP = `Usage: trueshift <command> [options]

Run the service:
  start [--config <file>]                  ingest, analyser, alerts, API and page in one process
  check [--config <file>]                  validate the configuration and list every problem
  token create --name <n> [--scopes]       create an API token (shown once)
  demo                                     the service on a simulated dairy evaporator, live
  demo --offline                           the demo plant's history files, analysed offline

Work with the store (directly, also while the service runs):
  import <file.csv>                        a history file into the store, with a progress bar
  mark --tag <t> --label <text> [--at]     mark a plant change on the tags it should move
  withdraw <mark-id> --reason <text>       withdraw a mark, saying why
  evidence <tag> [--mark <id>]             the latest evidence of each active mark on a tag
  alerts [--state <state>]                 the alerts, newest first
  ack <alert-id> --note <text>             acknowledge an alert
  report <mark-id> <tag> [--out <file>]    export the decision report as one HTML file

Without the service:
  analyse <file.csv> --change <when>       the evidence for one tag's change, from a history file

  help [command]                           this text, or a command's own

Run "trueshift help <command>" or "trueshift <command> --help" for a command's options.
Exit codes: 0 ok, 1 unexpected error, 2 bad arguments, 3 bad input or configuration, 4 not found.`;

const COMMAND_HELP: Readonly<Record<string, string>> = {
  start: START_HELP,
  check: CHECK_HELP,
  token: TOKEN_HELP,
  demo: DEMO_HELP,
  import: IMPORT_HELP,
  mark: MARK_HELP,
  withdraw: WITHDRAW_HELP,
  evidence: EVIDENCE_HELP,
  alerts: ALERTS_HELP,
  ack: ACK_HELP,
  report: REPORT_HELP,
  analyse: ANALYSE_HELP,
  analyze: ANALYSE_HELP,
};

async function analyse(argv: string[], io: CliIo): Promise<ExitCode> {
  const request = parseAnalyseArgs(argv);
  if (request === 'help') return showHelp(io, ANALYSE_HELP);
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

function help(rest: readonly string[], io: CliIo): ExitCode {
  const [topic, ...extra] = rest;
  if (topic === undefined) return showHelp(io, HELP);
  const text = COMMAND_HELP[topic];
  if (text === undefined || extra.length > 0) {
    io.stderr(`trueshift: there is no command "${rest.join(' ')}".\n\n${HELP}\n`);
    return EXIT.usage;
  }
  return showHelp(io, text);
}

/** Who the OS says runs the command; marks and acknowledgements record it. */
function osUser(): string {
  try {
    return userInfo().username;
  } catch {
    // A container user without a passwd entry has no name to give.
    return `uid-${process.getuid?.() ?? 'unknown'}`;
  }
}

export interface CliContext {
  io: CliIo;
  clock: () => number;
  stopSignal: StopSignal;
  /** The name recorded on marks and acknowledgements when --by is not given. */
  user: () => string;
}

export async function runCli(argv: string[], context: Partial<CliContext> = {}): Promise<number> {
  const io = context.io ?? processIo;
  const clock = context.clock ?? Date.now;
  const stopSignal = context.stopSignal ?? processStopSignal;
  const user = context.user ?? osUser;
  const [command, ...rest] = argv;
  try {
    switch (command) {
      case 'analyse':
      case 'analyze':
        return await analyse(rest, io);
      case 'demo':
        return await demoCommand(rest, io, clock, stopSignal);
      case 'start':
        return await startCommand(rest, io, stopSignal);
      case 'check':
        return await checkCommand(rest, io);
      case 'token':
        return await tokenCommand(rest, io, clock);
      case 'import':
        return await importCommand(rest, io, clock);
      case 'mark':
        return await markCommand(rest, io, clock, user);
      case 'withdraw':
        return await withdrawCommand(rest, io, clock, user);
      case 'evidence':
        return await evidenceCommand(rest, io);
      case 'alerts':
        return await alertsCommand(rest, io);
      case 'ack':
        return await ackCommand(rest, io, clock, user);
      case 'report':
        return await reportCommand(rest, io, clock);
      case undefined:
      case '--help':
      case '-h':
        return showHelp(io, HELP);
      case 'help':
        return help(rest, io);
      default:
        io.stderr(`trueshift: unknown command "${command}".\n\n${HELP}\n`);
        return EXIT.usage;
    }
  } catch (error) {
    if (isTrueshiftError(error)) {
      io.stderr(`trueshift: ${error.code}: ${error.message}\n`);
      return exitCodeOf(error.code);
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
