import { join } from 'node:path';
import { TrueshiftError } from '@trueshift/errors';
import { analyseText, renderReport } from '../analyse.js';
import { noMoreArguments, parseCommand, showHelp } from '../command-args.js';
import { demoPlant } from '../demo-plant.js';
import { EXIT } from '../io.js';
import type { CliIo, ExitCode } from '../io.js';
import { numberOption, positive } from '../options.js';
import type { StopSignal } from './service.js';

export const DEMO_HELP = `Usage: trueshift demo [--port <n>] [--broker-port <n>] [--data <dir>] [--duration <s>]
                      [--speed <x>] [--seed <n>]
       trueshift demo --offline [--out <dir>] [--json]

Runs trueshift on a simulated plant of the project's own invention: the falling-film evaporator of
a dairy that concentrates skim milk. The service starts in one process on its own folder (a fresh
store every run) with the embedded MQTT broker; months of history are back-filled over MQTT, as a
historian replay would send them, and then live values arrive every few seconds. At the live start
a new clean-in-place sequence is marked on steam per tonne (which really falls) and a new lab
method on the concentrate's dry solids (which changes nothing); unmarked, a tube starts to leak and
the condensate's conductivity creeps up. Within about two minutes the page shows a credible fall,
a verdict of no credible shift, and an alert for the unmarked rise.

The page's address and an admin token (to paste into the page) are printed at the start. The demo
runs until Ctrl-C, or for --duration seconds of live time.

  --port <n>          the page and API port on 127.0.0.1 (default 8640; 0 picks a free one)
  --broker-port <n>   the embedded MQTT broker's port (default 18830; 0 picks a free one)
  --data <dir>        the demo's folder (default data/demo-run); its store is replaced each run
  --duration <s>      stop after this many seconds of live values
  --speed <x>         run the plant x times faster (default 1)
  --seed <n>          another draw of the plant's noise (default 17)
  --offline           instead, write the plant's history files to --out (default data/demo) and
                      print the evidence for each, as "trueshift analyse" would; --json for
                      JSON (--out and --json alone also mean --offline)
  -h, --help          this text

Exit codes: 0 done, 2 bad arguments, 3 a port is taken or the folder cannot be used, 1 unexpected
error.`;

/** The draw whose verdicts are typical of the simulation: see live-plant.test.ts for the others. */
export const DEMO_SEED = 17;

async function offlineDemo(out: string, json: boolean, io: CliIo): Promise<ExitCode> {
  const reports = [];
  for (const tag of demoPlant()) {
    const path = join(out, tag.file);
    await io.writeText(path, tag.csv);
    const report = analyseText(tag.csv, path, {
      file: path,
      json,
      change: tag.changeTime,
      parse: { skipBadRows: false },
      settings: { direction: tag.direction, riskLevel: 0.05, nBefore: tag.nBefore },
    });
    reports.push(report);
    if (!json) {
      io.stdout(`${tag.description} (${tag.unit}). In the simulation: ${tag.truth}.\n`);
      io.stdout(`${renderReport(report)}\n`);
      io.stdout(
        `Try it yourself: trueshift analyse ${path} --change ${tag.changeTime} --direction ${tag.direction} --before ${tag.nBefore}\n\n`,
      );
    }
  }
  if (json) io.stdout(`${JSON.stringify(reports, null, 2)}\n`);
  return EXIT.ok;
}

const port = (x: number): boolean => Number.isInteger(x) && x >= 0 && x <= 65_535;

export async function demoCommand(
  argv: string[],
  io: CliIo,
  clock: () => number,
  stopSignal: StopSignal,
): Promise<ExitCode> {
  const args = parseCommand(argv, {
    allowPositionals: true,
    options: {
      offline: { type: 'boolean' },
      out: { type: 'string' },
      json: { type: 'boolean' },
      port: { type: 'string' },
      'broker-port': { type: 'string' },
      data: { type: 'string' },
      duration: { type: 'string' },
      speed: { type: 'string' },
      seed: { type: 'string' },
    },
  });
  if (args === 'help') return showHelp(io, DEMO_HELP);
  const { values, positionals } = args;
  noMoreArguments(positionals);
  const live = ['port', 'broker-port', 'data', 'duration', 'speed', 'seed'] as const;
  // --out and --json only mean something offline, so they ask for it as the demo always did.
  if (values.offline === true || values.out !== undefined || values.json === true) {
    const wrong = live.filter((name) => values[name] !== undefined);
    if (wrong.length > 0) {
      throw new TrueshiftError(
        'INVALID_ARGUMENT',
        `--${wrong.join(', --')} belong to the live demo, not the offline one.`,
      );
    }
    return offlineDemo(values.out ?? join('data', 'demo'), values.json === true, io);
  }
  const duration = numberOption(values.duration, 'duration', positive, 'seconds above 0');
  const seed = numberOption(
    values.seed,
    'seed',
    (x) => Number.isInteger(x) && x >= 0 && x < 2 ** 31,
    'a whole number ≥ 0',
  );
  // The live demo brings the whole service; the offline one and the help text do not need it.
  const { runLiveDemo } = await import('./live-demo.js');
  await runLiveDemo(
    {
      dataDir: values.data ?? join('data', 'demo-run'),
      port: numberOption(values.port, 'port', port, 'a port number 0–65535') ?? 8640,
      brokerPort:
        numberOption(values['broker-port'], 'broker-port', port, 'a port number 0–65535') ?? 18830,
      durationMs: duration === undefined ? null : duration * 1000,
      speed:
        numberOption(values.speed, 'speed', (x) => x > 0 && x <= 20, 'above 0, at most 20') ?? 1,
      seed: seed ?? DEMO_SEED,
    },
    { io, clock, stopSignal },
  );
  return EXIT.ok;
}
