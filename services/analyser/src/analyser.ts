/**
 * The rolling analyser: follows the store's samples in insertion order and keeps, per tag, the
 * watch without a mark and the data-quality watch, and per (mark, tag) the live evidence. All the
 * judging is pure (@trueshift/analyser); this module reads, writes, batches and persists.
 *
 * Restart safety rests on one rule: the state of every tag and mark and the cursor (the last sample
 * seq folded in) are saved together, in one store transaction, at the end of every cycle. After a
 * crash the analyser resumes from the saved cursor with the saved state, so no sample is counted
 * twice. Alerts raised in a cycle that did not get to save are raised again on the replay and the
 * store folds them into the open alert by their dedupe key.
 */

import { EventEmitter } from 'node:events';
import { setImmediate as yieldToLoop } from 'node:timers/promises';
import {
  chartDesign,
  chartDesignKey,
  createDataQuality,
  createMarkTagState,
  createPeriods,
  createWatch,
  credibleShiftAlert,
  dataQualityAlert,
  dataQualityCheck,
  dataQualitySample,
  dedupeKeys,
  evaluateMarkCatchUp,
  inControlHistory,
  markAddSample,
  markClosePeriod,
  markRebuildAfter,
  markSettings,
  outOfRangeAlert,
  outOfRangeEvents,
  periodClose,
  periodFold,
  periodMeans,
  periodStartOf,
  resolveTagSettings,
  settlingWindows,
  unmarkedShiftAlert,
  watchConfigure,
  watchRebaseline,
  watchUpdate,
} from '@trueshift/analyser';
import type {
  ChartDesign,
  DataQualityEvent,
  DataQualityState,
  MarkEvaluation,
  MarkSettings,
  MarkTagState,
  PeriodState,
  ResolvedTagSettings,
  WatchSettings,
  WatchState,
} from '@trueshift/analyser';
import type { Verdict } from '@trueshift/stats';
import { isTrueshiftError, TrueshiftError } from '@trueshift/errors';
import { QUALITY_GOOD, shardOf } from '@trueshift/store';
import type {
  AlertChange,
  AlertInput,
  AnalyserStateRecord,
  EvidenceSnapshot,
  LeaseFence,
  MarkRecord,
  OutboxChannel,
  Store,
  StoredSample,
  TagKind,
  TagRecord,
} from '@trueshift/store';
import type { Logger } from 'pino';

export interface AnalyserOptions {
  /** Samples read and folded per cycle; the event loop gets a turn between cycles. */
  batchSize?: number;
  /** How often to look for new samples without a notify; 0 leaves it to notify() and drain(). */
  pollMs?: number;
  /** The service's defaults under every tag's own settings. */
  defaults?: Partial<ResolvedTagSettings>;
  /** Where every new or changed alert is sent (through the store's outbox). */
  alertTargets?: readonly { channel: OutboxChannel; target: string }[];
  /** A period of a continuous tag is closed by the clock only this long after its end. */
  periodGraceMs?: number;
  /** Tag settings are re-read this often. */
  tagRefreshMs?: number;
  /** Quarantine entries read per page when counting out-of-range refusals. */
  quarantinePage?: number;
  /** Clears a stale or stuck alert when the tag recovers. */
  clearRecoveredAlerts?: boolean;
  /**
   * Follow only the tags of this shard of the store (several instances share the work). The state
   * is kept under keys of the shard's own, so analysers of different shards never touch each
   * other's records.
   */
  shard?: number;
  /** The lease this analyser works under: saving fails with LEASE_LOST once another holds it. */
  fence?: LeaseFence;
}

export interface AnalyserDeps {
  store: Store;
  log: Logger;
  clock: () => number;
  options?: AnalyserOptions;
}

export interface EvidenceUpdate {
  markId: string;
  tag: string;
  snapshot: EvidenceSnapshot;
  verdict: Verdict;
  risk: number | null;
  nAfter: number;
  settled: boolean;
}

export interface AnalyserEvents {
  evidence: [EvidenceUpdate];
  alert: [AlertChange];
  /** Another instance holds the shard now: this analyser has stopped and saved nothing more. */
  'lease-lost': [LeaseFence];
}

export interface CycleReport {
  cycles: number;
  samples: number;
  /** Samples older than their tag's latest: they changed history, not the live watch. */
  backfill: number;
  evaluations: number;
  alertChanges: number;
  /** The last sample seq folded in. */
  lastSeq: number;
}

export interface Analyser {
  readonly events: EventEmitter<AnalyserEvents>;
  /** Starts following: a first look now, then on every notify() and poll. */
  start(): void;
  /** New samples are in the store (called by ingest). */
  notify(): void;
  /** Cycles until caught up with the store, one bounded batch at a time. */
  drain(): Promise<CycleReport>;
  /** Samples stored but not yet folded in. */
  lag(): Promise<number>;
  processedSeq(): number;
  watchState(tag: string): WatchState | null;
  markState(markId: string, tag: string): MarkTagState | null;
  /** Finishes the current batch, saves the state and stops. */
  close(): Promise<void>;
}

/** Samples per page when reading a mark's history: about 0.1 s of the event loop each. */
const HISTORY_PAGE = 100_000;
/** A shard's lag is counted up to this many samples; beyond it the answer is "at least". */
const LAG_COUNT_LIMIT = 10_000;

/** A tag's state as persisted. */
interface TagState {
  kind: TagKind;
  periodMs: number;
  watch: WatchState;
  /** Period means in the making for the watch (continuous tags), anchored at the epoch. */
  periods: PeriodState | null;
  dq: DataQualityState;
  /** Time of the latest live sample; an older one is back-fill. */
  lastTime: number | null;
}

interface CursorState {
  lastSeq: number;
  /** Quarantine entries up to this id have been counted. */
  quarantineId: number;
}

interface TagRuntime {
  name: string;
  settings: ResolvedTagSettings;
  state: TagState;
  lastSeq: number;
  dirty: boolean;
}

interface MarkRuntime {
  mark: MarkRecord;
  tag: string;
  state: MarkTagState;
  lastSeq: number;
  dirty: boolean;
  /** The in-control history: read once, kept until back-fill or another mark changes it. */
  history: Float64Array | null;
  historyKey: string | null;
  /** Back-fill landed in the after-window: re-read it from the store. */
  needsRebuild: boolean;
}

type AlertOp = { raise: AlertInput } | { clear: string; tag: string };

/**
 * Chart designs by (k, λ, ARL), shared by every analyser in the process: solving h and L costs
 * milliseconds each and a design depends on nothing else.
 */
const designs = new Map<string, ChartDesign>();

function isRecord(value: unknown): value is Record<string, unknown> {
  return typeof value === 'object' && value !== null;
}

export function buildAnalyser(deps: AnalyserDeps): Analyser {
  const { store, log, clock } = deps;
  const options = deps.options ?? {};
  const batchSize = options.batchSize ?? 10_000;
  const pollMs = options.pollMs ?? 1000;
  const defaults = options.defaults ?? {};
  const targets = options.alertTargets ?? [];
  const periodGraceMs = options.periodGraceMs ?? 10_000;
  const tagRefreshMs = options.tagRefreshMs ?? 30_000;
  const quarantinePage = options.quarantinePage ?? 500;
  const clearRecovered = options.clearRecoveredAlerts ?? true;
  const shard = options.shard;
  const fence = options.fence;
  if (shard !== undefined && !(Number.isInteger(shard) && shard >= 0 && shard < store.shards)) {
    throw new TrueshiftError(
      'CONFIG_INVALID',
      `shard must be a whole number from 0 to ${store.shards - 1}, got ${shard}.`,
    );
  }
  // Without a shard the keys are those of a single-process store, as saved before shards existed.
  const prefix = shard === undefined ? '' : `shard:${shard}/${store.shards}:`;
  const CURSOR_KEY = `${prefix}cursor`;
  const tagKey = (tag: string): string => `${prefix}tag:${tag}`;
  const markKey = (markId: string, tag: string): string => `${prefix}mark:${markId}:${tag}`;
  const mine = (tag: string): boolean =>
    shard === undefined || shardOf(tag, store.shards) === shard;
  if (!(Number.isInteger(batchSize) && batchSize >= 1)) {
    throw new TrueshiftError(
      'CONFIG_INVALID',
      `batchSize must be a whole number >= 1, got ${batchSize}.`,
    );
  }
  // Checked once here so a bad default fails at start-up, not at the first sample.
  try {
    resolveTagSettings({}, defaults);
  } catch (error) {
    throw new TrueshiftError(
      'CONFIG_INVALID',
      error instanceof Error ? error.message : String(error),
      {
        cause: error,
      },
    );
  }

  const events = new EventEmitter<AnalyserEvents>();

  let loaded = false;
  let cursor: CursorState = { lastSeq: 0, quarantineId: 0 };
  let tagRecords = new Map<string, TagRecord>();
  /** Each tag's settings resolved against the defaults, until the tags are re-read. */
  const resolved = new Map<string, ResolvedTagSettings>();
  let tagsReadAt = Number.NEGATIVE_INFINITY;
  const tags = new Map<string, TagRuntime>();
  const marks = new Map<string, MarkRuntime>();
  /** The same runtimes by tag, rebuilt whenever the marks are re-read. */
  let marksByTag = new Map<string, MarkRuntime[]>();
  /** Saved mark states not yet matched to a live mark (loaded at start). */
  let savedMarks = new Map<string, AnalyserStateRecord>();
  let allMarks: MarkRecord[] = [];

  let chain: Promise<unknown> = Promise.resolve();
  let timer: NodeJS.Timeout | null = null;
  let wake = false;
  let looping = false;
  let closing = false;
  let leaseLost = false;

  // ---- settings ----

  function settingsOf(tag: string): ResolvedTagSettings {
    const cached = resolved.get(tag);
    if (cached !== undefined) return cached;
    let settings: ResolvedTagSettings;
    try {
      settings = resolveTagSettings(tagRecords.get(tag)?.settings, defaults);
    } catch (error) {
      // One tag's bad settings must not stop the analysis of every other tag.
      log.warn({ err: error, tag }, 'tag settings are not valid; using the defaults');
      settings = resolveTagSettings({}, defaults);
    }
    resolved.set(tag, settings);
    return settings;
  }

  function designOf(settings: ResolvedTagSettings): ChartDesign {
    const wanted = {
      k: settings.cusumK,
      lambda: settings.ewmaLambda,
      targetArl: settings.inControlArl,
    };
    const key = chartDesignKey(wanted);
    let design = designs.get(key);
    if (design === undefined) {
      design = chartDesign(wanted);
      designs.set(key, design);
    }
    return design;
  }

  function watchSettingsOf(settings: ResolvedTagSettings): WatchSettings {
    const design = designOf(settings);
    return {
      k: design.k,
      h: design.h,
      lambda: design.lambda,
      L: design.L,
      minHistory: settings.minHistory,
      baselineSize: settings.baselineSize,
    };
  }

  function markSettingsOf(runtime: MarkRuntime): MarkSettings {
    const settings = settingsOf(runtime.tag);
    return markSettings(runtime.mark, settings, designOf(settings));
  }

  async function refreshTags(force: boolean): Promise<void> {
    const now = clock();
    if (!force && now - tagsReadAt < tagRefreshMs) return;
    tagRecords = new Map((await store.listTags()).map((t) => [t.name, t]));
    resolved.clear();
    tagsReadAt = now;
    for (const runtime of tags.values()) {
      const settings = settingsOf(runtime.name);
      runtime.settings = settings;
      const state = runtime.state;
      if (state.kind !== settings.kind || state.periodMs !== settings.periodMs) {
        // Values of another kind or period mean something else: the watch learns afresh.
        state.kind = settings.kind;
        state.periodMs = settings.periodMs;
        state.periods = settings.kind === 'continuous' ? createPeriods(settings.periodMs) : null;
        state.watch = createWatch(watchSettingsOf(settings));
        runtime.dirty = true;
      } else if (watchConfigure(state.watch, watchSettingsOf(settings))) {
        runtime.dirty = true;
      }
    }
  }

  // ---- loading ----

  async function ensureLoaded(): Promise<void> {
    if (loaded) return;
    const saved = await store.loadAnalyserState(CURSOR_KEY);
    cursor = { lastSeq: 0, quarantineId: 0 };
    if (saved !== null && isRecord(saved.state)) {
      const s = saved.state;
      cursor = {
        lastSeq: saved.lastSeq,
        quarantineId: typeof s.quarantineId === 'number' ? s.quarantineId : 0,
      };
    }
    await refreshTags(true);
    tags.clear();
    for (const record of await store.listAnalyserState(tagKey(''))) {
      const state = record.state as TagState;
      const name = record.key.slice(tagKey('').length);
      tags.set(name, {
        name,
        settings: settingsOf(name),
        state,
        lastSeq: record.lastSeq,
        dirty: false,
      });
    }
    marks.clear();
    savedMarks = new Map(
      (await store.listAnalyserState(`${prefix}mark:`)).map((record) => [record.key, record]),
    );
    loaded = true;
    log.info({ lastSeq: cursor.lastSeq, tags: tags.size }, 'analyser state loaded');
  }

  /** Forgets everything in memory; the next cycle starts again from the saved state. */
  function unload(): void {
    loaded = false;
    tags.clear();
    marks.clear();
    marksByTag = new Map();
    savedMarks.clear();
    allMarks = [];
  }

  // ---- marks ----

  function marksOfTag(tag: string): readonly MarkRuntime[] {
    return marksByTag.get(tag) ?? [];
  }

  async function refreshMarks(): Promise<void> {
    allMarks = await store.listMarks();
    const live = new Set<string>();
    for (const mark of allMarks) {
      for (const tag of mark.tags) {
        if (!mine(tag)) continue;
        const key = markKey(mark.id, tag);
        live.add(key);
        const existing = marks.get(key);
        if (existing?.mark.revision === mark.revision) {
          existing.mark = mark;
          continue;
        }
        const saved = savedMarks.get(key);
        savedMarks.delete(key);
        const savedState = saved?.state as MarkTagState | undefined;
        if (saved !== undefined && savedState?.revision === mark.revision) {
          marks.set(key, {
            mark,
            tag,
            state: savedState,
            lastSeq: saved.lastSeq,
            dirty: false,
            history: null,
            historyKey: null,
            needsRebuild: false,
          });
          continue;
        }
        // A new mark, or a corrected one: its after-window is whatever the store holds since it.
        const settings = settingsOf(tag);
        marks.set(key, {
          mark,
          tag,
          state: createMarkTagState(mark, tag, settings),
          lastSeq: cursor.lastSeq,
          dirty: true,
          history: null,
          historyKey: null,
          needsRebuild: true,
        });
        log.info({ markId: mark.id, tag, revision: mark.revision }, 'following a mark');
      }
    }
    // Withdrawn marks (and tags taken off a mark) are no longer judged.
    for (const key of [...marks.keys()]) if (!live.has(key)) marks.delete(key);
    marksByTag = new Map();
    for (const runtime of marks.values()) {
      const list = marksByTag.get(runtime.tag);
      if (list === undefined) marksByTag.set(runtime.tag, [runtime]);
      else list.push(runtime);
    }
  }

  async function historyOf(runtime: MarkRuntime, settings: MarkSettings): Promise<Float64Array> {
    const windows = settlingWindows(allMarks, runtime.tag, runtime.mark.at, runtime.mark.id);
    const key = JSON.stringify([windows, settings.kind, settings.periodMs]);
    if (runtime.history !== null && runtime.historyKey === key) return runtime.history;
    const columns = await readBefore(runtime.tag, runtime.mark.at);
    runtime.history = inControlHistory(columns.t, columns.value, {
      markAt: runtime.mark.at,
      windows,
      kind: settings.kind,
      periodMs: settings.periodMs,
    });
    runtime.historyKey = key;
    return runtime.history;
  }

  /**
   * A tag's good samples before `to`, newest page first, with a turn for the event loop between
   * pages: one read of 10^6 samples holds the loop for most of a second.
   */
  async function readBefore(
    tag: string,
    to: number,
  ): Promise<{ t: Float64Array; value: Float64Array }> {
    const pages: { t: Float64Array; value: Float64Array }[] = [];
    let upper = to;
    let total = 0;
    for (;;) {
      const page = await store.readSamples(tag, { to: upper, goodOnly: true, limit: HISTORY_PAGE });
      pages.push(page);
      total += page.t.length;
      const first = page.t[0];
      if (page.t.length < HISTORY_PAGE || first === undefined) break;
      upper = first;
      await yieldToLoop();
    }
    if (pages.length === 1 && pages[0] !== undefined) return pages[0];
    const t = new Float64Array(total);
    const value = new Float64Array(total);
    let at = 0;
    for (let i = pages.length - 1; i >= 0; i--) {
      const page = pages[i];
      if (page === undefined) continue;
      t.set(page.t, at);
      value.set(page.value, at);
      at += page.t.length;
    }
    return { t, value };
  }

  // ---- tags ----

  async function seedValues(
    tag: string,
    settings: ResolvedTagSettings,
    firstTime: number,
  ): Promise<ArrayLike<number>> {
    if (settings.kind === 'batch') {
      const columns = await store.readSamples(tag, {
        to: firstTime,
        goodOnly: true,
        limit: settings.baselineSize,
      });
      return columns.value;
    }
    const end = periodStartOf(firstTime, settings.periodMs);
    const columns = await store.readSamples(tag, {
      from: end - settings.baselineSize * settings.periodMs,
      to: end,
      goodOnly: true,
    });
    return periodMeans(columns.t, columns.value, settings.periodMs).mean;
  }

  async function tagRuntime(name: string, firstTime: number): Promise<TagRuntime> {
    let runtime = tags.get(name);
    if (runtime !== undefined) return runtime;
    if (!tagRecords.has(name)) await refreshTags(true);
    const settings = settingsOf(name);
    // The watch starts from the tag's stored history when there is one, so a tag that was in the
    // store before the analyser ran is watched from its first new sample.
    const seed = await seedValues(name, settings, firstTime);
    runtime = {
      name,
      settings,
      state: {
        kind: settings.kind,
        periodMs: settings.periodMs,
        watch: createWatch(watchSettingsOf(settings), seed),
        periods: settings.kind === 'continuous' ? createPeriods(settings.periodMs) : null,
        dq: createDataQuality(),
        lastTime: null,
      },
      lastSeq: 0,
      dirty: true,
    };
    tags.set(name, runtime);
    return runtime;
  }

  /** The watch holds still while a mark on the tag is unsettled: that mark's evidence speaks. */
  function watchPaused(tag: string, until: number): boolean {
    return marksOfTag(tag).some((m) => m.state.settled === null && m.mark.at < until);
  }

  function feedWatch(runtime: TagRuntime, t: number, value: number, until: number, ops: AlertOp[]) {
    if (watchPaused(runtime.name, until)) return;
    const shift = watchUpdate(runtime.state.watch, t, value);
    if (shift === null) return;
    log.info({ tag: runtime.name, shift }, 'unmarked shift');
    ops.push({ raise: unmarkedShiftAlert(runtime.name, shift) });
  }

  function dataQualityOps(tag: string, event: DataQualityEvent, ops: AlertOp[]): void {
    const alert = dataQualityAlert(tag, event);
    if (alert !== null) {
      ops.push({ raise: alert });
    } else if (clearRecovered) {
      ops.push({
        clear: event.kind === 'stale-ended' ? dedupeKeys.stale(tag) : dedupeKeys.stuck(tag),
        tag,
      });
    }
  }

  // ---- one sample ----

  function fold(runtime: TagRuntime, sample: StoredSample, report: CycleReport, ops: AlertOp[]) {
    runtime.lastSeq = sample.seq;
    runtime.dirty = true;
    const value = sample.value;
    // The store's own rule for a usable sample (goodOnly): good quality and a value.
    if (value === null || !Number.isFinite(value) || sample.quality < QUALITY_GOOD) return;
    const { t } = sample;
    const state = runtime.state;
    const tagMarks = marksOfTag(runtime.name).filter((m) => sample.seq > m.lastSeq);
    for (const m of tagMarks) {
      m.lastSeq = sample.seq;
      m.dirty = true;
    }

    if (state.lastTime !== null && t < state.lastTime) {
      report.backfill += 1;
      for (const m of tagMarks) {
        if (m.state.settled !== null) continue;
        if (t < m.mark.at) m.history = null;
        else m.needsRebuild = true;
      }
      return;
    }
    state.lastTime = t;

    for (const event of dataQualitySample(state.dq, runtime.settings, t, value)) {
      dataQualityOps(runtime.name, event, ops);
    }
    for (const m of tagMarks) {
      const result = markAddSample(m.state, markSettingsOf(m), t, value);
      // A live sample before a mark's time (a mark set ahead of its data) lengthens its history.
      if (result === 'before-mark') m.history = null;
      else if (result === 'late') m.needsRebuild = true;
    }
    if (state.periods === null) {
      feedWatch(runtime, t, value, t + 1, ops);
      return;
    }
    const folded = periodFold(state.periods, t, value);
    if (folded.kind === 'closed') {
      const p = folded.period;
      feedWatch(runtime, p.start, p.mean, p.end, ops);
    }
  }

  // ---- after a batch ----

  function closePeriods(now: number, ops: AlertOp[]): void {
    const until = now - periodGraceMs;
    for (const runtime of tags.values()) {
      const periods = runtime.state.periods;
      if (periods === null) continue;
      const closed = periodClose(periods, until);
      if (closed !== null) {
        runtime.dirty = true;
        feedWatch(runtime, closed.start, closed.mean, closed.end, ops);
      }
    }
    for (const m of marks.values()) {
      if (m.state.periods !== null && markClosePeriod(m.state, markSettingsOf(m), until)) {
        m.dirty = true;
      }
    }
  }

  function checkStale(now: number, ops: AlertOp[]): void {
    for (const runtime of tags.values()) {
      const event = dataQualityCheck(runtime.state.dq, runtime.settings, now);
      if (event === null) continue;
      runtime.dirty = true;
      dataQualityOps(runtime.name, event, ops);
    }
  }

  async function countOutOfRange(ops: AlertOp[]): Promise<void> {
    const seen = cursor.quarantineId;
    const entries = [];
    let newest = seen;
    let beforeId: number | undefined;
    // Newest first; stop at what was counted before. A flood beyond 20 pages is skipped, not
    // replayed for ever: the alert is open by then anyway.
    for (let page = 0; page < 20; page++) {
      const rows = await store.listQuarantine({
        limit: quarantinePage,
        ...(beforeId === undefined ? {} : { beforeId }),
      });
      const first = rows[0];
      if (first === undefined) break;
      newest = Math.max(newest, first.id);
      let reachedSeen = false;
      for (const row of rows) {
        if (row.id <= seen) {
          reachedSeen = true;
          break;
        }
        if (row.tag !== null && mine(row.tag)) entries.push(row);
      }
      if (reachedSeen || rows.length < quarantinePage) break;
      beforeId = rows[rows.length - 1]?.id;
    }
    cursor.quarantineId = newest;
    for (const event of outOfRangeEvents(entries)) ops.push({ raise: outOfRangeAlert(event) });
  }

  async function runAlertOps(ops: readonly AlertOp[], report: CycleReport): Promise<void> {
    const now = clock();
    const outbox = targets.map((target) => ({ ...target, createdAt: now }));
    for (const op of ops) {
      if ('raise' in op) {
        const change = await store.raiseAlert(op.raise, outbox);
        report.alertChanges += 1;
        events.emit('alert', change);
        continue;
      }
      const uncleared = [
        ...(await store.listAlerts({ tag: op.tag, state: 'open', limit: 100 })),
        ...(await store.listAlerts({ tag: op.tag, state: 'acknowledged', limit: 100 })),
      ].filter((alert) => alert.dedupeKey === op.clear);
      for (const alert of uncleared) {
        const change = await store.clearAlert(alert.id, now, outbox);
        report.alertChanges += 1;
        events.emit('alert', change);
      }
    }
  }

  async function evaluate(runtime: MarkRuntime, report: CycleReport): Promise<void> {
    const settings = markSettingsOf(runtime);
    if (runtime.needsRebuild) {
      const columns = await store.readSamples(runtime.tag, {
        from: runtime.mark.at,
        goodOnly: true,
      });
      markRebuildAfter(runtime.state, settings, columns.t, columns.value);
      runtime.needsRebuild = false;
      runtime.dirty = true;
    }
    const state = runtime.state;
    if (!state.pending || state.settled !== null || state.after.length === 0) return;
    const history = await historyOf(runtime, settings);
    runtime.dirty = true;
    for (const evaluation of evaluateMarkCatchUp(state, history, settings)) {
      report.evaluations += 1;
      await publish(runtime, settings, evaluation, report);
    }
  }

  async function publish(
    runtime: MarkRuntime,
    settings: MarkSettings,
    evaluation: MarkEvaluation,
    report: CycleReport,
  ): Promise<void> {
    const snapshot = await store.addEvidenceSnapshot({
      markId: runtime.mark.id,
      tag: runtime.tag,
      sampleTime: evaluation.sampleTime,
      evaluatedAt: clock(),
      nAfter: evaluation.nAfter,
      risk: evaluation.risk,
      verdict: evaluation.verdict,
      body: snapshotBody(runtime, settings, evaluation),
    });
    events.emit('evidence', {
      markId: runtime.mark.id,
      tag: runtime.tag,
      snapshot,
      verdict: evaluation.verdict,
      risk: evaluation.risk,
      nAfter: evaluation.nAfter,
      settled: evaluation.settled !== null,
    });
    const ops: AlertOp[] = [];
    if (evaluation.openAlert) {
      ops.push({ raise: credibleShiftAlert(evaluation, runtime.mark.label, snapshot) });
    }
    if (evaluation.newBaseline !== null) {
      log.info(
        {
          markId: runtime.mark.id,
          tag: runtime.tag,
          newLevel: evaluation.newBaseline,
          why: evaluation.settledNow,
        },
        'mark settled; new watch baseline',
      );
      const tagRuntime = tags.get(runtime.tag);
      if (tagRuntime !== undefined) {
        watchRebaseline(tagRuntime.state.watch, evaluation.newBaseline);
        tagRuntime.dirty = true;
      }
    }
    await runAlertOps(ops, report);
  }

  function snapshotBody(
    runtime: MarkRuntime,
    settings: MarkSettings,
    evaluation: MarkEvaluation,
  ): unknown {
    return {
      basis: evaluation.basis,
      markRevision: runtime.mark.revision,
      settings: {
        direction: settings.direction,
        riskLevel: settings.riskLevel,
        nBefore: settings.nBefore,
        nAfterCap: settings.nAfterCap,
        smallestShift: settings.smallestShift,
        alertAfter: settings.alertAfter,
      },
      evaluation: {
        number: evaluation.number,
        counts: evaluation.counts,
        consecutive: evaluation.consecutive,
        openAlert: evaluation.openAlert,
        settled: evaluation.settled,
        newBaseline: evaluation.newBaseline,
      },
      evidence: evaluation.evidence,
    };
  }

  async function saveState(): Promise<void> {
    const now = clock();
    const records: AnalyserStateRecord[] = [];
    for (const runtime of tags.values()) {
      if (!runtime.dirty) continue;
      records.push({
        key: tagKey(runtime.name),
        state: runtime.state,
        lastSeq: runtime.lastSeq,
        updatedAt: now,
      });
    }
    for (const runtime of marks.values()) {
      if (!runtime.dirty) continue;
      records.push({
        key: markKey(runtime.mark.id, runtime.tag),
        state: runtime.state,
        lastSeq: runtime.lastSeq,
        updatedAt: now,
      });
    }
    records.push({ key: CURSOR_KEY, state: cursor, lastSeq: cursor.lastSeq, updatedAt: now });
    // One call, one transaction: the states and the cursor they belong to are saved together.
    await store.saveAnalyserState(records, fence);
    for (const runtime of tags.values()) runtime.dirty = false;
    for (const runtime of marks.values()) runtime.dirty = false;
  }

  // ---- the cycle ----

  async function cycle(): Promise<CycleReport> {
    const report: CycleReport = {
      cycles: 1,
      samples: 0,
      backfill: 0,
      evaluations: 0,
      alertChanges: 0,
      lastSeq: cursor.lastSeq,
    };
    await ensureLoaded();
    await refreshTags(false);
    await refreshMarks();
    const batch = await store.samplesAfter(cursor.lastSeq, batchSize, shard);
    const ops: AlertOp[] = [];
    for (const sample of batch) {
      if (sample.seq <= cursor.lastSeq) continue;
      const runtime = tags.get(sample.tag) ?? (await tagRuntime(sample.tag, sample.t));
      if (sample.seq > runtime.lastSeq) fold(runtime, sample, report, ops);
      cursor.lastSeq = sample.seq;
      report.samples += 1;
    }
    report.lastSeq = cursor.lastSeq;
    const now = clock();
    closePeriods(now, ops);
    const caughtUp = batch.length < batchSize;
    // While a backlog is being worked through, a tag whose samples sit in the next batch only
    // looks silent.
    if (caughtUp) checkStale(now, ops);
    await countOutOfRange(ops);
    await runAlertOps(ops, report);
    for (const runtime of [...marks.values()]) {
      if (runtime.needsRebuild || runtime.state.pending) {
        await evaluate(runtime, report);
        // One evaluation is O(N) in the history: let ingest in between.
        await yieldToLoop();
      }
    }
    // Folding a batch and saving the state of every tag it touched are each tens of ms with
    // a thousand tags; ingest gets a turn between them.
    await yieldToLoop();
    await saveState();
    return report;
  }

  function serialised<T>(work: () => Promise<T>): Promise<T> {
    const next = chain.then(work, work);
    chain = next.catch(() => undefined);
    return next;
  }

  function drain(): Promise<CycleReport> {
    return serialised(async () => {
      const total: CycleReport = {
        cycles: 0,
        samples: 0,
        backfill: 0,
        evaluations: 0,
        alertChanges: 0,
        lastSeq: cursor.lastSeq,
      };
      for (;;) {
        let report: CycleReport;
        try {
          report = await cycle();
        } catch (error) {
          // Memory may be ahead of what was saved; start again from the saved state.
          unload();
          throw error;
        }
        total.cycles += 1;
        total.samples += report.samples;
        total.backfill += report.backfill;
        total.evaluations += report.evaluations;
        total.alertChanges += report.alertChanges;
        total.lastSeq = report.lastSeq;
        if (report.samples < batchSize || closing) return total;
        await yieldToLoop();
      }
    });
  }

  async function loop(): Promise<void> {
    looping = true;
    try {
      while (wake && !closing) {
        wake = false;
        try {
          await drain();
        } catch (error) {
          if (fence !== undefined && isTrueshiftError(error) && error.code === 'LEASE_LOST') {
            // Going on would only fail again; the new owner resumes from the last saved state.
            leaseLost = true;
            closing = true;
            if (timer !== null) clearInterval(timer);
            timer = null;
            log.warn({ shard, epoch: fence.epoch }, 'lease lost; this shard analyser stops');
            events.emit('lease-lost', fence);
            return;
          }
          log.error({ err: error }, 'analyser cycle failed; resuming from the saved state');
        }
      }
    } finally {
      looping = false;
    }
  }

  function notify(): void {
    if (closing) return;
    wake = true;
    if (!looping) void loop();
  }

  return {
    events,
    start() {
      if (closing) return;
      if (timer === null && pollMs > 0) timer = setInterval(notify, pollMs);
      notify();
    },
    notify,
    drain,
    async lag() {
      if (shard === undefined) return Math.max(0, (await store.lastSeq()) - cursor.lastSeq);
      // Seqs are shared by every shard, so only a count of this shard's own says how far behind.
      return (await store.samplesAfter(cursor.lastSeq, LAG_COUNT_LIMIT, shard)).length;
    },
    processedSeq: () => cursor.lastSeq,
    watchState: (tag) => tags.get(tag)?.state.watch ?? null,
    markState: (markId, tag) => marks.get(markKey(markId, tag))?.state ?? null,
    async close() {
      closing = true;
      if (timer !== null) clearInterval(timer);
      timer = null;
      // The batch under way finishes (drain stops after it), then the state is saved once more.
      await serialised(async () => {
        if (loaded && !leaseLost) await saveState();
      });
    },
  };
}
