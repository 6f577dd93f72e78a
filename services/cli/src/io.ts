import { mkdir, readFile, writeFile } from 'node:fs/promises';
import { resolve } from 'node:path';
import type { ErrorCode } from '@trueshift/errors';

/** What the command line touches, passed in so tests can run it without a process of its own. */
export interface CliIo {
  stdout: (text: string) => void;
  stderr: (text: string) => void;
  readText: (path: string) => Promise<string>;
  writeText: (path: string, text: string) => Promise<void>;
  /** Whether stderr is a terminal a person watches: progress bars are drawn only then. */
  stderrIsTerminal?: boolean;
}

export const processIo: CliIo = {
  stdout: (text) => process.stdout.write(text),
  stderr: (text) => process.stderr.write(text),
  readText: (path) => readFile(path, 'utf8'),
  writeText: async (path, text) => {
    await mkdir(resolve(path, '..'), { recursive: true });
    await writeFile(path, text, 'utf8');
  },
  stderrIsTerminal: process.stderr.isTTY,
};

/** Exit codes scripts can rely on. */
export const EXIT = { ok: 0, unexpected: 1, usage: 2, badInput: 3, notFound: 4 } as const;

export type ExitCode = (typeof EXIT)[keyof typeof EXIT];

/**
 * Things named on the command line that the store does not hold. A file that cannot be read stays
 * bad input (3), as `analyse` has always said.
 */
const NOT_FOUND: ReadonlySet<ErrorCode> = new Set<ErrorCode>([
  'MARK_NOT_FOUND',
  'ALERT_NOT_FOUND',
  'TAG_NOT_FOUND',
  'TOKEN_NOT_FOUND',
  'EVIDENCE_NOT_FOUND',
  'NOT_FOUND',
]);

export function exitCodeOf(code: ErrorCode): ExitCode {
  if (code === 'INVALID_ARGUMENT') return EXIT.usage;
  if (NOT_FOUND.has(code)) return EXIT.notFound;
  if (code === 'INTERNAL') return EXIT.unexpected;
  return EXIT.badInput;
}
