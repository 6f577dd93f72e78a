import { rm } from 'node:fs/promises';
import { join, resolve } from 'node:path';
import { Writable } from 'node:stream';
import { setTimeout as sleep } from 'node:timers/promises';
import { connectAsync } from 'mqtt';
import type { MqttClient } from 'mqtt';
import { issueToken } from '@trueshift/api';
import { createLogger, startApp } from '@trueshift/app';
import type { RunningApp } from '@trueshift/app';
import { CAUTION, resolveConfig } from '@trueshift/config';
import type { ResolvedConfig } from '@trueshift/config';
import { TrueshiftError } from '@trueshift/errors';
import { readEvidence } from '@trueshift/report';
import { isVerdict } from '@trueshift/stats';
import type { AlertChange, MarkRecord } from '@trueshift/store';
import { riskText, VERDICT_WORDS } from '../evidence-rows.js';
import type { CliIo } from '../io.js';
import { createLivePlant } from '../live-plant.js';
import type { LivePlant, PlantSample, PlantTag } from '../live-plant.js';
import { portTaken } from './service.js';
import type { StopSignal } from './service.js';

export interface LiveDemoOptions {
  /** The demo's own folder: its store is made afresh on every run. */
  dataDir: string;
  /** 0 picks a free port. */
  port: number;
  brokerPort: number;
  /** Live time to run for, after the back-fill; null runs until stopped. */
  durationMs: number | null;
  /** How many times faster than the plant's compressed time the demo runs. */
  speed: number;
  seed: number;
}

export interface LiveDemoDeps {
  io: CliIo;
  clock: () => number;
  stopSignal: StopSignal;
}

/** The topic the default subscription reads: trueshift/samples/<tag>. */
const TOPIC = 'trueshift/samples/';
/** Samples per back-fill message: about 60 kB of JSON, well inside the default payload limit. */
const BACKFILL_CHUNK = 1500;
/** How long the back-fill may take to land in the store before the demo gives up. */
const BACKFILL_TIMEOUT_MS = 120_000;
/** The live loop's longest nap: a stop is noticed within it. */
const TICK_MS = 200;

/** Settings of the demo's own service: the defaults, its own folder, loopback ports. */
export function demoConfig(
  options: Pick<LiveDemoOptions, 'dataDir' | 'port' | 'brokerPort'>,
): ResolvedConfig {
  const result = resolveConfig(
    {
      store: { path: join(options.dataDir, 'trueshift.db') },
      drop: { folder: join(options.dataDir, 'drop') },
      mqtt: {
        url: null,
        embedded: { host: '127.0.0.1', port: options.brokerPort },
        clientId: 'trueshift-demo-ingest',
      },
      http: { host: '127.0.0.1', port: options.port, readWithoutToken: false },
      // The demo tells its own story on stdout; the service speaks up only when something is wrong.
      log: { level: 'warn', pretty: false },
    },
    {},
  );
  if (!result.ok) {
    throw new TrueshiftError(
      'INVALID_ARGUMENT',
      `The demo's settings: ${result.problems.join('; ')}`,
    );
  }
  return result.config;
}

/** A fresh store for every run: the SQLite file and its WAL, nothing else in the folder. */
async function freshStore(config: ResolvedConfig): Promise<void> {
  const path = resolve(config.store.path);
  for (const suffix of ['', '-wal', '-shm', '-journal']) {
    await rm(`${path}${suffix}`, { force: true });
  }
}

function stderrStream(io: CliIo): Writable {
  return new Writable({
    write(chunk: Buffer | string, _encoding, callback) {
      io.stderr(typeof chunk === 'string' ? chunk : chunk.toString('utf8'));
      callback();
    },
  });
}

/**
 * The back-fill messages of one tag, as a historian replay would send them. The newest value goes
 * first, in the first message, ahead of the values before it: the analyser then meets the tag at
 * its current level, seeds its watch from the history stored with it, and takes all older values
 * as back-fill. Sent oldest first, months of in-control history would run through the live watch.
 */
export function backfillMessages(samples: readonly PlantSample[]): string[] {
  const newest = samples[samples.length - 1];
  if (newest === undefined) return [];
  const older = samples.slice(0, -1);
  const messages: string[] = [];
  const encode = (list: readonly PlantSample[]): string =>
    JSON.stringify(list.map((s) => ({ time: s.t, value: s.value })));
  let end = older.length;
  let first = true;
  while (first || end > 0) {
    const start = Math.max(0, end - (first ? BACKFILL_CHUNK - 1 : BACKFILL_CHUNK));
    const chunk = older.slice(start, end);
    messages.push(encode(first ? [newest, ...chunk] : chunk));
    first = false;
    end = start;
  }
  return messages;
}

function clockText(ms: number): string {
  const seconds = Math.max(0, Math.floor(ms / 1000));
  return `${String(Math.floor(seconds / 60)).padStart(2, '0')}:${String(seconds % 60).padStart(2, '0')}`;
}

function describePlant(plant: LivePlant, speed: number): string {
  const width = Math.max(...plant.tags.map((t) => t.name.length));
  const lines = plant.tags.map((tag) => {
    const every =
      tag.historyIntervalMs >= 3_600_000
        ? `one value per production shift (8 h in the history, ${(tag.liveIntervalMs / speed / 1000).toFixed(1)} s live)`
        : `a value every ${(tag.liveIntervalMs / speed / 1000).toFixed(1)} s live`;
    return `  ${tag.name.padEnd(width)}  ${tag.description} [${tag.unit}]; ${every}.\n  ${' '.repeat(width)}  In the simulation: ${tag.truth}.`;
  });
  return lines.join('\n');
}

async function waitForBackfill(
  app: RunningApp,
  expected: ReadonlyMap<string, number>,
  clock: () => number,
  stopped: () => boolean,
): Promise<void> {
  const until = clock() + BACKFILL_TIMEOUT_MS;
  for (;;) {
    let missing = 0;
    for (const [tag, count] of expected) {
      missing += Math.max(0, count - (await app.store.countSamples(tag)));
    }
    if (missing === 0 || stopped()) return;
    if (clock() > until) {
      throw new TrueshiftError(
        'STORE_UNAVAILABLE',
        `The back-fill did not reach the store in ${BACKFILL_TIMEOUT_MS / 1000} s (${missing} samples missing).`,
      );
    }
    await sleep(100);
  }
}

async function placeMark(
  apiUrl: string,
  token: string,
  body: Record<string, unknown>,
): Promise<MarkRecord> {
  // The demo marks its changes the way a script or the page does: over the API, with its token.
  const response = await fetch(`${apiUrl}/api/v1/marks`, {
    method: 'POST',
    headers: { authorization: `Bearer ${token}`, 'content-type': 'application/json' },
    body: JSON.stringify(body),
  });
  const text = await response.text();
  if (response.status !== 201) {
    throw new TrueshiftError(
      'INTERNAL',
      `Placing a demo mark failed (${response.status}): ${text}`,
    );
  }
  return JSON.parse(text) as MarkRecord;
}

/** Narrates the analyser's findings as they come: each change of verdict, each alert opened. */
function narrate(app: RunningApp, io: CliIo, clock: () => number, liveStart: number): void {
  const verdicts = new Map<string, string>();
  const stamp = (): string => `[${clockText(clock() - liveStart)}]`;
  app.events.on('evidence', (update) => {
    const key = `${update.markId}:${update.tag}`;
    if (verdicts.get(key) === update.verdict) return;
    verdicts.set(key, update.verdict);
    io.stdout(
      `${stamp()} ${update.tag}: ${VERDICT_WORDS[update.verdict]} (${valuesAfter(update.nAfter)}${risk(update.snapshot.body)})\n`,
    );
  });
  app.events.on('alert', (change: AlertChange) => {
    if (change.change !== 'opened') return;
    io.stdout(
      `${stamp()} alert ${change.alert.id} opened (${change.alert.kind}): ${change.alert.title}\n`,
    );
  });
}

async function publishLive(
  publisher: MqttClient,
  tag: PlantTag,
  time: number,
  value: number,
): Promise<void> {
  await publisher.publishAsync(`${TOPIC}${tag.name}`, JSON.stringify({ time, value }), { qos: 1 });
}

const valuesAfter = (n: number): string => `${n} value${n === 1 ? '' : 's'} after the mark`;

function risk(body: unknown): string {
  const view = readEvidence(body);
  return view === null ? '' : `, ${riskText(view)}`;
}

async function summary(app: RunningApp, marks: readonly MarkRecord[]): Promise<string> {
  const lines = ['', 'Where things stand:'];
  for (const mark of marks) {
    for (const tag of mark.tags) {
      const snapshot = await app.store.latestEvidence(mark.id, tag);
      lines.push(
        `  ${tag}: ${snapshot === null ? 'no evaluation yet' : `${isVerdict(snapshot.verdict) ? VERDICT_WORDS[snapshot.verdict] : snapshot.verdict} (${valuesAfter(snapshot.nAfter)}${risk(snapshot.body)})`}`,
      );
    }
  }
  const alerts = await app.store.listAlerts({ limit: 20 });
  lines.push(alerts.length === 0 ? '  alerts: none' : '  alerts:');
  for (const alert of alerts)
    lines.push(`    ${alert.id} ${alert.state} ${alert.kind}: ${alert.title}`);
  return `${lines.join('\n')}\n`;
}

/**
 * The running demo: trueshift started on its own folder, an invented evaporator back-filled with
 * months of history over MQTT and then fed live values, two marked changes and one unmarked one.
 */
export async function runLiveDemo(options: LiveDemoOptions, deps: LiveDemoDeps): Promise<void> {
  const { io, clock } = deps;
  const config = demoConfig(options);
  await freshStore(config);
  const plant = createLivePlant(options.seed);
  // An object, not a local flag: the callback sets it while the loops below read it.
  const stop = { requested: false };
  void deps.stopSignal().then(() => {
    stop.requested = true;
  });

  const log = createLogger(config.log, { destination: stderrStream(io) });
  let app: RunningApp;
  try {
    app = await startApp({ config, log, clock });
  } catch (error) {
    throw portTaken(error, 'name free ones with --port and --broker-port (0 picks any).') ?? error;
  }
  let publisher: MqttClient | null = null;
  try {
    const now = clock();
    for (const tag of plant.tags) {
      // The tags are described before any sample arrives, so the analyser meets them configured.
      await app.store.upsertTag(
        {
          name: tag.name,
          unit: tag.unit,
          description: tag.description,
          better: tag.better,
          settings: tag.settings,
        },
        now,
      );
    }
    const { secret } = await issueToken(app.store, 'demo', ['admin'], now);
    io.stdout(
      `trueshift demo: an invented falling-film evaporator of a dairy, concentrating skim milk.

  page:    ${app.apiUrl}/   (paste the token when the page asks for it)
  token:   ${secret}   (admin; shown only now)
  API:     ${app.apiUrl}/api/v1
  MQTT:    ${app.brokerUrl} (embedded), samples on ${TOPIC}<tag>
  store:   ${config.store.path} (made afresh on every run)

The plant (time is compressed: a production shift of 8 hours lasts seconds here):
${describePlant(plant, options.speed)}

${CAUTION}

`,
    );

    publisher = await connectAsync(app.brokerUrl, {
      clientId: `trueshift-demo-plant-${process.pid}`,
      protocolVersion: 4,
      reconnectPeriod: 1000,
    });
    const started = clock();
    const history = plant.history(started);
    const expected = new Map<string, number>();
    for (const tag of plant.tags) {
      const samples = history.get(tag.name) ?? [];
      expected.set(tag.name, samples.length);
      for (const payload of backfillMessages(samples)) {
        await publisher.publishAsync(`${TOPIC}${tag.name}`, payload, { qos: 1 });
      }
    }
    await waitForBackfill(app, expected, clock, () => stop.requested);
    const days = (tag: PlantTag): number =>
      Math.round((tag.historyLength * tag.historyIntervalMs) / 86_400_000);
    io.stdout(
      `Back-filled ${[...expected.values()].reduce((a, b) => a + b, 0)} historical values over MQTT in ${((clock() - started) / 1000).toFixed(1)} s: ${plant.tags.map((t) => `${t.name} ${expected.get(t.name) ?? 0} over ${days(t)} days`).join(', ')}.\n`,
    );

    // The changes go live now: the marks are placed at this moment, the first live values follow.
    const liveStart = clock();
    narrate(app, io, clock, liveStart);
    const marks: MarkRecord[] = [];
    for (const mark of plant.marks) {
      const record = await placeMark(app.apiUrl, secret, {
        tags: mark.tags,
        at: liveStart,
        label: mark.label,
        note: mark.note,
        direction: mark.direction,
        nBefore: mark.nBefore,
        nAfterCap: mark.nAfterCap,
      });
      marks.push(record);
      io.stdout(
        `Marked "${record.label}" on ${record.tags.join(', ')} (expected direction ${record.direction}), mark ${record.id}.\n`,
      );
    }
    io.stdout(
      `\nLive from now on${options.durationMs === null ? ' (Ctrl-C stops the demo)' : ` for ${Math.round(options.durationMs / 1000)} s`}; the page follows along.\n`,
    );

    const due = new Map(
      plant.tags.map((tag) => [tag.name, liveStart + tag.liveIntervalMs / options.speed]),
    );
    const endAt =
      options.durationMs === null ? Number.POSITIVE_INFINITY : liveStart + options.durationMs;
    while (!stop.requested) {
      const nowMs = clock();
      if (nowMs >= endAt) break;
      for (const tag of plant.tags) {
        let next = due.get(tag.name) ?? nowMs;
        while (next <= nowMs) {
          // Stamped with its scheduled time, so a late tick never gives two values one time.
          const time = Math.round(next);
          await publishLive(
            publisher,
            tag,
            time,
            plant.next(tag.name, (time - liveStart) * options.speed),
          );
          next += tag.liveIntervalMs / options.speed;
        }
        due.set(tag.name, next);
      }
      const soonest = Math.min(...due.values(), endAt);
      await sleep(Math.max(5, Math.min(TICK_MS, soonest - clock())));
    }
    io.stdout(await summary(app, marks));
    io.stdout(`\n${CAUTION}\n`);
  } finally {
    await publisher?.endAsync();
    await app.close();
  }
}
