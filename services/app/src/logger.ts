import { pino } from 'pino';
import type { Logger } from 'pino';
import type { ResolvedConfig } from '@trueshift/config';

/**
 * JSON lines by default, for log collectors; readable lines when a person watches a terminal.
 */
export function createLogger(
  settings: ResolvedConfig['log'],
  options: { isTerminal?: boolean; destination?: NodeJS.WritableStream } = {},
): Logger {
  const pretty =
    settings.pretty === 'auto' ? (options.isTerminal ?? process.stdout.isTTY) : settings.pretty;
  if (pretty && options.destination === undefined) {
    return pino({
      level: settings.level,
      transport: {
        target: 'pino-pretty',
        options: { colorize: true, translateTime: 'SYS:HH:MM:ss' },
      },
    });
  }
  return options.destination === undefined
    ? pino({ level: settings.level })
    : pino({ level: settings.level }, options.destination);
}
