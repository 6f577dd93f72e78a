import { CAUTION } from '@trueshift/config';
import { outboxTargets } from '@trueshift/delivery';
import { TrueshiftError } from '@trueshift/errors';
import type { AlertRecord, AlertState } from '@trueshift/store';
import { noMoreArguments, onePositional, parseCommand, showHelp } from '../command-args.js';
import { wrap } from '../format.js';
import { EXIT } from '../io.js';
import type { CliIo, ExitCode } from '../io.js';
import { maxLength, numberOption, positiveInteger, requiredText } from '../options.js';
import { STORE_NOTE, withStore } from '../store-access.js';

export const ALERTS_HELP = `Usage: trueshift alerts [--state open|acknowledged|cleared] [--tag <tag>] [--limit <n>] [--json]

Lists alerts, newest first: credible shifts after a mark, unmarked shifts the watch found, and
stale, stuck or out-of-range data. Acknowledge one with "trueshift ack".

  --state <state>   only open, acknowledged or cleared alerts (default: all)
  --tag <tag>       only this tag's
  --limit <n>       at most n (default 50)
  --json            the alerts as JSON
  --config <file>   the configuration naming the store
  -h, --help        this text

${STORE_NOTE}

Exit codes: 0 listed (also when there are none), 2 bad arguments, 3 bad configuration or store,
1 unexpected error.`;

export const ACK_HELP = `Usage: trueshift ack <alert-id> --note <text> [--by <name>] [--config <file>] [--json]

Acknowledges an alert with a note saying what is being done; it stays acknowledged until it is
cleared. The change is queued for the alert's webhooks and MQTT topic, which the running service
delivers.

${STORE_NOTE}

Exit codes: 0 acknowledged, 2 bad arguments, 3 the alert is cleared or bad configuration, 4 no
such alert, 1 unexpected error.`;

const STATES: readonly AlertState[] = ['open', 'acknowledged', 'cleared'];

const iso = (t: number): string => new Date(t).toISOString().replace(/\.\d{3}Z$/, 'Z');

/** Columns padded to their widest cell, each alert's title wrapped on the lines under it. */
export function alertTable(alerts: readonly AlertRecord[], width = 100): string {
  const head = ['id', 'state', 'kind', 'tag', 'opened', 'repeats'];
  const cells = alerts.map((a) => [
    String(a.id),
    a.state,
    a.kind,
    a.tag,
    iso(a.openedAt),
    String(a.repeats),
  ]);
  const widths = head.map((h, i) => Math.max(h.length, ...cells.map((row) => row[i]?.length ?? 0)));
  const line = (row: readonly string[]): string =>
    row
      .map((cell, i) => cell.padEnd(widths[i] ?? 0))
      .join('  ')
      .trimEnd();
  const indent = '    ';
  const out = [line(head)];
  alerts.forEach((alert, i) => {
    out.push(line(cells[i] ?? []));
    for (const text of wrap(alert.title, width - indent.length)) out.push(`${indent}${text}`);
    if (alert.state !== 'open' && alert.note !== null) {
      const by = `acknowledged by ${alert.acknowledgedBy ?? '?'}: ${alert.note}`;
      for (const text of wrap(by, width - indent.length)) out.push(`${indent}${text}`);
    }
  });
  return out.join('\n');
}

export async function alertsCommand(argv: string[], io: CliIo): Promise<ExitCode> {
  const args = parseCommand(argv, {
    allowPositionals: true,
    options: {
      state: { type: 'string' },
      tag: { type: 'string' },
      limit: { type: 'string' },
      json: { type: 'boolean' },
      config: { type: 'string' },
    },
  });
  if (args === 'help') return showHelp(io, ALERTS_HELP);
  const { values, positionals } = args;
  noMoreArguments(positionals);
  const state = values.state as AlertState | undefined;
  if (state !== undefined && !STATES.includes(state)) {
    throw new TrueshiftError('INVALID_ARGUMENT', '--state must be open, acknowledged or cleared.');
  }
  const limit = numberOption(values.limit, 'limit', positiveInteger, 'a whole number ≥ 1') ?? 50;
  return withStore(values.config, { create: false }, async (store) => {
    const alerts = await store.listAlerts({
      ...(state === undefined ? {} : { state }),
      ...(values.tag === undefined ? {} : { tag: values.tag }),
      limit,
    });
    if (values.json === true) {
      io.stdout(`${JSON.stringify({ caution: CAUTION, alerts }, null, 2)}\n`);
    } else if (alerts.length === 0) {
      io.stdout(`No ${state ?? ''}${state === undefined ? '' : ' '}alerts.\n\n${CAUTION}\n`);
    } else {
      io.stdout(`${alertTable(alerts)}\n\n${CAUTION}\n`);
    }
    return EXIT.ok;
  });
}

export async function ackCommand(
  argv: string[],
  io: CliIo,
  clock: () => number,
  user: () => string,
): Promise<ExitCode> {
  const args = parseCommand(argv, {
    allowPositionals: true,
    options: {
      note: { type: 'string' },
      by: { type: 'string' },
      json: { type: 'boolean' },
      config: { type: 'string' },
    },
  });
  if (args === 'help') return showHelp(io, ACK_HELP);
  const { values, positionals } = args;
  const idText = onePositional(positionals, 'the alert to acknowledge');
  const id = Number(idText);
  if (!/^\d+$/.test(idText) || !positiveInteger(id)) {
    throw new TrueshiftError('INVALID_ARGUMENT', `An alert id is a whole number; got "${idText}".`);
  }
  const note = maxLength(requiredText(values.note, 'note', 'what is being done'), 'note', 2000);
  const by = values.by === undefined ? user() : requiredText(values.by, 'by', 'who acknowledges');
  return withStore(values.config, { create: false }, async (store, config) => {
    const now = clock();
    const { alert } = await store.acknowledgeAlert(id, by, note, now, outboxTargets(config, now));
    io.stdout(
      values.json === true
        ? `${JSON.stringify(alert, null, 2)}\n`
        : `Acknowledged alert ${alert.id} (${alert.title}) as ${by}: ${note}\n`,
    );
    return EXIT.ok;
  });
}
