import { parseArgs } from 'node:util';
import type { ParseArgsConfig } from 'node:util';
import { TrueshiftError } from '@trueshift/errors';
import { EXIT } from './io.js';
import type { CliIo, ExitCode } from './io.js';

type OptionsConfig = NonNullable<ParseArgsConfig['options']>;

/** A command's own options; -h and --help are added for every command alike. */
export interface CommandConfig<O extends OptionsConfig, P extends boolean> {
  options: O;
  /** Left out, the command refuses any positional argument with node's own message. */
  allowPositionals?: P;
}

export type CommandArgs<O extends OptionsConfig, P extends boolean> = ReturnType<
  typeof parseArgs<{ args: string[]; strict: true; allowPositionals: P; options: O }>
>;

const HELP_OPTION = { help: { type: 'boolean', short: 'h' } } as const;

/**
 * The command's arguments, or 'help' when it was asked for its help text. Strict: an unknown or
 * malformed option throws node's ERR_PARSE_ARGS_* error, which the dispatcher reports as a usage
 * error, also when --help came with it.
 */
export function parseCommand<const O extends OptionsConfig, const P extends boolean = false>(
  argv: readonly string[],
  config: CommandConfig<O, P>,
): CommandArgs<O, P> | 'help' {
  // Widened: parseArgs cannot follow a generic options object through to its result type.
  const options: OptionsConfig = { ...config.options, ...HELP_OPTION };
  const { values, positionals } = parseArgs({
    args: argv,
    strict: true,
    allowPositionals: config.allowPositionals ?? false,
    options,
  });
  if (values.help === true) return 'help';
  return { values, positionals } as CommandArgs<O, P>;
}

export function showHelp(io: CliIo, text: string): ExitCode {
  io.stdout(`${text}\n`);
  return EXIT.ok;
}

/** Refuses positional arguments left over; `hint` says what the person may have meant. */
export function noMoreArguments(extra: readonly string[], hint = ''): void {
  if (extra.length > 0) {
    throw new TrueshiftError(
      'INVALID_ARGUMENT',
      `Unexpected argument "${extra.join(' ')}"${hint}.`,
    );
  }
}

/** The one positional argument a command takes, refusing extras. */
export function onePositional(positionals: readonly string[], what: string): string {
  const [first, ...extra] = positionals;
  if (first === undefined) throw new TrueshiftError('INVALID_ARGUMENT', `Name ${what}.`);
  noMoreArguments(extra);
  return first;
}
