import { existsSync, readFileSync } from 'node:fs';
import { resolve } from 'node:path';
import { parse } from 'yaml';
import { resolveConfig } from '@trueshift/config';
import type { ResolvedConfig } from '@trueshift/config';
import { TrueshiftError } from '@trueshift/errors';

/** The file read when none is named: the project's own config folder, if it has a trueshift.yaml. */
export const DEFAULT_CONFIG_FILE = 'config/trueshift.yaml';

export interface LoadedConfig {
  config: ResolvedConfig;
  /** The file the settings came from, or null when only defaults and the environment were used. */
  file: string | null;
}

/**
 * The one place that reads the environment and the configuration file. Everything else receives the
 * validated, frozen result. A bad file or bad setting stops start-up with every problem listed.
 */
export function loadConfig(
  options: { file?: string; cwd?: string; env?: Readonly<Record<string, string | undefined>> } = {},
): LoadedConfig {
  const env = options.env ?? process.env;
  const cwd = options.cwd ?? process.cwd();
  const named = options.file ?? env.TRUESHIFT_CONFIG;
  const path = resolve(cwd, named ?? DEFAULT_CONFIG_FILE);
  let parsed: unknown = undefined;
  let file: string | null = null;
  if (named !== undefined || existsSync(path)) {
    let text: string;
    try {
      text = readFileSync(path, 'utf8');
    } catch (error) {
      throw new TrueshiftError(
        'CONFIG_INVALID',
        `Cannot read ${path}: ${(error as Error).message}`,
      );
    }
    try {
      parsed = parse(text) as unknown;
    } catch (error) {
      throw new TrueshiftError(
        'CONFIG_INVALID',
        `${path} is not valid YAML: ${(error as Error).message}`,
      );
    }
    file = path;
  }
  // TRUESHIFT_CONFIG names the file; it is not a setting.
  const settings = Object.fromEntries(
    Object.entries(env).filter(([name]) => name !== 'TRUESHIFT_CONFIG'),
  );
  const result = resolveConfig(parsed, settings);
  if (!result.ok) {
    throw new TrueshiftError(
      'CONFIG_INVALID',
      `${file ?? 'The settings'} ${result.problems.length === 1 ? 'has a problem' : `has ${result.problems.length} problems`}:\n${result.problems.map((p) => `  - ${p}`).join('\n')}`,
    );
  }
  return { config: result.config, file };
}
