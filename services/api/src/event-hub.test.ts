import { describe, expect, it } from 'vitest';
import { createEventHub, formatEvent } from './event-hub.js';
import type { IntervalTimers, StreamClient } from './event-hub.js';

const T = 1_780_000_000_000;

function timers(): IntervalTimers & { fire(): void; running(): number } {
  const callbacks = new Map<number, () => void>();
  let next = 1;
  return {
    setInterval(callback) {
      callbacks.set(next, callback);
      return next++;
    },
    clearInterval(handle) {
      callbacks.delete(handle as number);
    },
    fire() {
      for (const callback of callbacks.values()) callback();
    },
    running: () => callbacks.size,
  };
}

function client(backlog = 0): StreamClient & { chunks: string[]; ended: boolean } {
  const c = {
    chunks: [] as string[],
    ended: false,
    write(chunk: string) {
      c.chunks.push(chunk);
      return true;
    },
    end() {
      c.ended = true;
    },
    backlog: () => backlog,
  };
  return c;
}

describe('event hub', () => {
  const make = (ringSize = 3) => {
    const t = timers();
    const hub = createEventHub({
      clock: () => T,
      timers: t,
      ringSize,
      heartbeatMs: 1000,
      maxBacklogBytes: 100,
    });
    return { hub, t };
  };

  it('numbers events from the clock upward, so ids after a restart are larger', () => {
    const { hub } = make();
    expect(hub.lastId()).toBe(T - 1);
    expect([hub.publish('alert', {}).id, hub.publish('mark', {}).id]).toEqual([T, T + 1]);
  });

  it('replays what a client missed, tells it to reload when that is gone', () => {
    const { hub } = make(3);
    for (let i = 0; i < 5; i++) hub.publish('evidence', { i });
    // Ring: T+2, T+3, T+4.
    expect(hub.resume(null)).toEqual({ kind: 'fresh' });
    expect(hub.resume(T + 4)).toEqual({ kind: 'replay', events: [] });
    const replay = hub.resume(T + 1);
    expect(replay.kind === 'replay' && replay.events.map((e) => e.id)).toEqual([
      T + 2,
      T + 3,
      T + 4,
    ]);
    expect(hub.resume(T).kind).toBe('reload');
    expect(hub.resume(T + 99).kind).toBe('reload');
    expect(hub.resume(0).kind).toBe('reload');
  });

  it('writes one-line JSON events with id and name', () => {
    const text = formatEvent({ id: 7, kind: 'alert', at: T, data: { title: 'a\nb' } });
    expect(text).toBe(`id: 7\nevent: alert\ndata: {"title":"a\\nb","publishedAt":${T}}\n\n`);
  });

  it('beats while clients are attached, and cuts off a client that does not keep up', () => {
    const { hub, t } = make();
    const fast = client();
    const slow = client(1000);
    const detachFast = hub.attach(fast, null);
    hub.attach(slow, null);
    expect(t.running()).toBe(1);
    t.fire();
    expect(fast.chunks.some((c) => c.startsWith(': heartbeat'))).toBe(true);
    expect(slow.ended).toBe(true);
    expect(hub.clients()).toBe(1);
    detachFast();
    expect(t.running()).toBe(0);
  });
});
