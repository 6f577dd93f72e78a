/**
 * Several trueshift instances on one PostgreSQL database. Each shard of tags is analysed by exactly
 * one instance at a time: the one holding the shard's lease in the database. Every `renewMs` an
 * instance says it is alive, renews its leases, and takes or gives back shards until it holds its
 * fair share of them. An instance that dies stops renewing; once its leases expire the others take
 * its shards and their analysers resume from the state saved in the database, from the last sample
 * that state had folded in, so no sample is missed or counted twice.
 *
 * Every alert, evidence and mark change reaches every instance through the store's messages
 * (LISTEN/NOTIFY), so an API client sees every change whichever instance it talks to.
 */
import { EventEmitter } from 'node:events';
import type { Analyser, EvidenceUpdate } from '@trueshift/analyser-service';
import { isVerdict } from '@trueshift/stats';
import { fairShare } from '@trueshift/store';
import type {
  AlertChange,
  ClusterMessage,
  ClusterStore,
  Lease,
  LeaseFence,
  MarkRecord,
} from '@trueshift/store';
import type { Logger } from 'pino';

export interface ClusterTimers {
  setInterval(callback: () => void, ms: number): unknown;
  clearInterval(handle: unknown): void;
}

export interface ClusterOptions {
  /** A lease not renewed for this long may be taken by another instance. */
  leaseMs: number;
  /** How often leases are renewed and the shards shared out again; at most leaseMs / 2. */
  renewMs: number;
}

export interface ClusterDeps {
  store: ClusterStore;
  log: Logger;
  clock: () => number;
  timers: ClusterTimers;
  options: ClusterOptions;
  /** The analyser of one shard, working under its lease; the cluster starts and closes it. */
  makeAnalyser: (shard: number, fence: LeaseFence) => Analyser;
}

export interface MarkChange {
  change: 'created' | 'corrected' | 'withdrawn';
  mark: MarkRecord;
}

export interface ClusterEvents {
  alert: [AlertChange];
  evidence: [EvidenceUpdate];
  mark: [MarkChange];
}

export interface Cluster {
  /** Changes made by this instance's analysers and by every other instance. */
  readonly events: EventEmitter<ClusterEvents>;
  readonly instance: string;
  /** Starts listening and takes a first share of the shards. */
  start(): Promise<void>;
  /** One round of heartbeat, renewal and sharing out; the timer calls it, tests may too. */
  balance(): Promise<void>;
  /** The shards this instance analyses now, in order. */
  owned(): number[];
  /** Samples stored but not yet analysed, summed over this instance's shards. */
  lag(): Promise<number>;
  /** Wakes every owned shard's analyser (something changed that the store sends no message for). */
  notify(): void;
  /** Runs every owned shard's analyser until it has caught up (tests, shutdown). */
  drain(): Promise<void>;
  /** Stops the analysers (each saves its state), gives the leases back and stops listening. */
  close(): Promise<void>;
}

interface Held {
  lease: Lease;
  analyser: Analyser;
  /** Set once the analyser said it lost the lease: it has stopped by itself. */
  lost: boolean;
}

export function buildCluster(deps: ClusterDeps): Cluster {
  const { store, log, clock, timers, options } = deps;
  const events = new EventEmitter<ClusterEvents>();
  const held = new Map<number, Held>();
  let timer: unknown = null;
  let unlisten: (() => Promise<void>) | null = null;
  let closing = false;
  let round: Promise<void> | null = null;
  /** A round was asked for while one ran: run another right after it. */
  const asked = { again: false };
  // Read through a call: both change while a round awaits, which flow analysis cannot see.
  const roundAgain = (): boolean => asked.again && !closing;

  function startShard(lease: Lease): void {
    const fence: LeaseFence = { shard: lease.shard, owner: lease.owner, epoch: lease.epoch };
    const analyser = deps.makeAnalyser(lease.shard, fence);
    const entry: Held = { lease, analyser, lost: false };
    analyser.events.on('alert', (change) => events.emit('alert', change));
    analyser.events.on('evidence', (update) => events.emit('evidence', update));
    analyser.events.on('lease-lost', () => {
      entry.lost = true;
      // Someone else holds it now: forget it at once and settle the rest in a round.
      if (held.get(lease.shard) === entry) held.delete(lease.shard);
      void balance();
    });
    held.set(lease.shard, entry);
    analyser.start();
    log.info({ shard: lease.shard, epoch: lease.epoch }, 'shard taken');
  }

  async function stopShard(shard: number, release: boolean): Promise<void> {
    const entry = held.get(shard);
    if (entry === undefined) return;
    held.delete(shard);
    try {
      await entry.analyser.close();
    } catch (error) {
      // The new owner resumes from the last state that was saved; nothing is lost by this.
      log.warn({ err: error, shard }, 'shard analyser did not save its last state');
    }
    if (release) await store.releaseLease(shard);
    log.info({ shard, released: release }, 'shard given up');
  }

  async function oneRound(): Promise<void> {
    const now = clock();
    const until = now + options.leaseMs;
    const alive = await store.heartbeat(now, until);
    const renewed = new Map((await store.renewLeases(now, until)).map((l) => [l.shard, l]));
    for (const [shard, entry] of [...held.entries()]) {
      const lease = renewed.get(shard);
      if (lease?.epoch === entry.lease.epoch) {
        entry.lease = lease;
      } else {
        // Expired while away (a long pause): its state may be saved only if nobody took it.
        await stopShard(shard, false);
      }
    }
    // A lease renewed but with no analyser (this instance restarted within the lease): run it.
    for (const lease of renewed.values()) if (!held.has(lease.shard)) startShard(lease);

    const target = fairShare(store.shards, alive, store.instance);
    if (held.size > target) {
      const extra = [...held.keys()].sort((a, b) => b - a).slice(0, held.size - target);
      for (const shard of extra) await stopShard(shard, true);
    } else if (held.size < target) {
      const taken = await store.claimLeases(target - held.size, now, until);
      for (const lease of taken) startShard(lease);
    }
  }

  function balance(): Promise<void> {
    if (closing) return Promise.resolve();
    if (round !== null) {
      asked.again = true;
      return round;
    }
    round = (async () => {
      do {
        asked.again = false;
        try {
          await oneRound();
        } catch (error) {
          log.error({ err: error }, 'lease round failed; trying again at the next one');
        }
      } while (roundAgain());
    })().finally(() => {
      round = null;
    });
    return round;
  }

  async function onMessage(message: ClusterMessage): Promise<void> {
    if (message.kind === 'samples') {
      for (const shard of message.shards) held.get(shard)?.analyser.notify();
      return;
    }
    if (message.kind === 'mark') {
      // Every owned analyser re-reads the marks at its next cycle; wake them for it now.
      for (const entry of held.values()) entry.analyser.notify();
      if (message.origin === store.instance) return;
      const mark = await store.getMark(message.markId);
      if (mark !== null) events.emit('mark', { change: message.change, mark });
      return;
    }
    // This instance's own changes went out on its own events when they were made.
    if (message.origin === store.instance) return;
    if (message.kind === 'alert') {
      const alert = await store.getAlert(message.alertId);
      if (alert !== null) events.emit('alert', { alert, change: message.change });
      return;
    }
    const snapshot = await store.getEvidenceSnapshot(message.snapshotId);
    if (snapshot === null) return;
    events.emit('evidence', {
      markId: snapshot.markId,
      tag: snapshot.tag,
      snapshot,
      verdict: isVerdict(snapshot.verdict) ? snapshot.verdict : 'still-gathering',
      risk: snapshot.risk,
      nAfter: snapshot.nAfter,
      settled: isSettled(snapshot.body),
    });
  }

  return {
    events,
    instance: store.instance,
    async start() {
      unlisten = await store.listen(
        (message) => {
          onMessage(message).catch((error: unknown) => {
            log.warn({ err: error, message }, 'a message from another instance could not be read');
          });
        },
        () => {
          log.warn(
            'the message connection was lost and is back; some changes may not have been seen',
          );
          for (const entry of held.values()) entry.analyser.notify();
        },
      );
      await balance();
      timer = timers.setInterval(() => void balance(), options.renewMs);
    },
    balance,
    owned: () => [...held.keys()].sort((a, b) => a - b),
    async lag() {
      let total = 0;
      for (const entry of held.values()) total += await entry.analyser.lag();
      return total;
    },
    notify() {
      for (const entry of held.values()) entry.analyser.notify();
    },
    async drain() {
      for (const entry of [...held.values()]) await entry.analyser.drain();
    },
    async close() {
      if (timer !== null) timers.clearInterval(timer);
      timer = null;
      closing = true;
      await round;
      for (const shard of [...held.keys()]) {
        try {
          await stopShard(shard, true);
        } catch (error) {
          log.warn({ err: error, shard }, 'could not give a shard back; it frees itself on expiry');
        }
      }
      await unlisten?.();
      unlisten = null;
    },
  };
}

function isSettled(body: unknown): boolean {
  if (typeof body !== 'object' || body === null) return false;
  const evaluation = (body as { evaluation?: unknown }).evaluation;
  if (typeof evaluation !== 'object' || evaluation === null) return false;
  const settled = (evaluation as { settled?: unknown }).settled;
  return settled !== null && settled !== undefined;
}
