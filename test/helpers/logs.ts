/** A pino logger that keeps its records, so a test can check what the service said and why. */
import { pino, type Logger } from 'pino';

export interface CapturedLog {
  log: Logger;
  records: () => { level: number; msg: string; err?: { message: string } }[];
}

export function captureLog(level: pino.Level = 'debug'): CapturedLog {
  const lines: string[] = [];
  const log = pino({ level }, { write: (line: string) => void lines.push(line) });
  return {
    log,
    records: () =>
      lines.map((line) => JSON.parse(line) as ReturnType<CapturedLog['records']>[number]),
  };
}
