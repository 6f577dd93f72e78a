import type { RunningApp } from '@trueshift/app';
import { TrueshiftError } from '@trueshift/errors';
import type { TokenScope } from '@trueshift/store';
import { CAUTION } from '../caution.js';
import { parseCommand, showHelp } from '../command-args.js';
import type { CliIo, ExitCode } from '../io.js';
import { EXIT } from '../io.js';
import { withStore } from '../store-access.js';

export const START_HELP = `Usage: trueshift start [--config <file>]

Runs trueshift in one process: the store (a SQLite file), MQTT ingest (the embedded broker when no
broker is configured), the drop folder, the analyser, alert delivery, and the API with the page.
Settings come from --config, else $TRUESHIFT_CONFIG, else config/trueshift.yaml if it exists, else the
defaults; TRUESHIFT_<SECTION>__<KEY> environment variables override them. Stops cleanly on Ctrl-C
(SIGINT) or SIGTERM: the current batches finish and the broker session is closed.

Exit codes: 0 stopped cleanly, 2 bad arguments, 3 the configuration is not valid or a port is
taken, 1 unexpected error.`;

export const CHECK_HELP = `Usage: trueshift check [--config <file>] [--json]

Validates the configuration without starting anything and lists every problem by its path.

Exit codes: 0 valid, 2 bad arguments, 3 not valid (or the file cannot be read).`;

export const TOKEN_HELP = `Usage: trueshift token create --name <name> [--scopes read,write,admin] [--config <file>]

Creates an API token and prints it once; only its hash is stored. Scopes: read (evidence, alerts),
write (marks, acknowledgements, settings, samples; includes read), admin (tokens, config; all).
Works whether or not the service is running: it writes to the same store file (creating it when
there is none yet, so the first admin token can exist before the first start).

Exit codes: 0 created, 2 bad arguments, 3 bad configuration or store, 1 unexpected error.`;

const SCOPES: readonly TokenScope[] = ['read', 'write', 'admin'];

/**
 * A port the service wants is taken: a configuration problem the person can fix, said so, rather
 * than a stack trace. Null for any other failure.
 */
export function portTaken(error: unknown, fix: string): TrueshiftError | null {
  if ((error as { code?: unknown } | null)?.code !== 'EADDRINUSE') return null;
  return new TrueshiftError(
    'CONFIG_INVALID',
    `A port is taken (${(error as Error).message}): ${fix}`,
    { cause: error },
  );
}

/** Resolves when the process is asked to stop; tests pass their own. */
export type StopSignal = () => Promise<string>;

export const processStopSignal: StopSignal = () =>
  new Promise((resolve) => {
    const stop = (signal: string): void => {
      process.off('SIGINT', stop);
      process.off('SIGTERM', stop);
      resolve(signal);
    };
    process.once('SIGINT', stop);
    process.once('SIGTERM', stop);
  });

export async function startCommand(
  argv: string[],
  io: CliIo,
  stopSignal: StopSignal = processStopSignal,
): Promise<ExitCode> {
  const args = parseCommand(argv, { options: { config: { type: 'string' } } });
  if (args === 'help') return showHelp(io, START_HELP);
  const { values } = args;
  const { createLogger, loadConfig, startApp } = await import('@trueshift/app');
  const { config, file } = loadConfig(values.config === undefined ? {} : { file: values.config });
  const log = createLogger(config.log);
  log.info({ config: file ?? 'defaults' }, 'starting trueshift');
  let app: RunningApp;
  try {
    app = await startApp({ config, log });
  } catch (error) {
    throw (
      portTaken(error, 'set http.port or mqtt.embedded.port to free ones (0 picks any).') ?? error
    );
  }
  io.stdout(
    `trueshift is running.\n  page and API: ${app.apiUrl}\n  MQTT broker:  ${app.brokerUrl}${app.embeddedBroker ? ' (embedded)' : ''}\n  drop folder:  ${config.drop.folder}\n\n${CAUTION}\n`,
  );
  const signal = await stopSignal();
  log.info({ signal }, 'stopping trueshift');
  await app.close();
  return EXIT.ok;
}

export async function checkCommand(argv: string[], io: CliIo): Promise<ExitCode> {
  const args = parseCommand(argv, {
    options: {
      config: { type: 'string' },
      json: { type: 'boolean' },
    },
  });
  if (args === 'help') return showHelp(io, CHECK_HELP);
  const { values } = args;
  const { loadConfig } = await import('@trueshift/app');
  try {
    const { config, file } = loadConfig(values.config === undefined ? {} : { file: values.config });
    io.stdout(
      values.json === true
        ? `${JSON.stringify({ valid: true, file, config }, null, 2)}\n`
        : `The configuration is valid (${file ?? 'defaults and environment only'}).\n`,
    );
    return EXIT.ok;
  } catch (error) {
    if (error instanceof TrueshiftError && error.code === 'CONFIG_INVALID') {
      if (values.json === true) {
        io.stdout(`${JSON.stringify({ valid: false, problems: error.detail ?? '' }, null, 2)}\n`);
      } else {
        io.stderr(`${error.detail ?? error.message}\n`);
      }
      return EXIT.badInput;
    }
    throw error;
  }
}

export async function tokenCommand(
  argv: string[],
  io: CliIo,
  clock: () => number,
): Promise<ExitCode> {
  const args = parseCommand(argv, {
    allowPositionals: true,
    options: {
      name: { type: 'string' },
      scopes: { type: 'string' },
      config: { type: 'string' },
    },
  });
  if (args === 'help') return showHelp(io, TOKEN_HELP);
  const { values, positionals } = args;
  if (positionals[0] !== 'create' || positionals.length > 1) {
    throw new TrueshiftError('INVALID_ARGUMENT', 'Say "trueshift token create --name <name>".');
  }
  const name = values.name?.trim() ?? '';
  if (name === '') throw new TrueshiftError('INVALID_ARGUMENT', '--name is required.');
  const scopes = (values.scopes ?? 'read').split(',').map((s) => s.trim()) as TokenScope[];
  const unknown = scopes.filter((scope) => !SCOPES.includes(scope));
  if (unknown.length > 0 || scopes.length === 0) {
    throw new TrueshiftError(
      'INVALID_ARGUMENT',
      `--scopes takes read, write and admin; "${unknown.join(', ')}" is not one.`,
    );
  }
  const { issueToken } = await import('@trueshift/api');
  await withStore(values.config, { create: true }, async (store) => {
    const { secret, token } = await issueToken(store, name, scopes, clock());
    io.stdout(
      `Token "${token.name}" (${token.scopes.join(', ')}), id ${token.id}. It is shown only now:\n${secret}\n`,
    );
  });
  return EXIT.ok;
}
