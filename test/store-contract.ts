/**
 * The behaviour every Store backend owes its callers, as one reusable suite. A backend's test file
 * calls `describeStoreContract` with a function that opens a fresh, empty store.
 */
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { isTrueshiftError } from '@trueshift/errors';
import type { ErrorCode } from '@trueshift/errors';
import { shardOf } from '@trueshift/store';
import type { MarkInput, OutboxChannel, OutboxInput, SampleInput, Store } from '@trueshift/store';

export interface OpenedStore {
  store: Store;
  /** Closes nothing: opens the same data again after `store.close()`. */
  reopen?: () => Promise<Store>;
  cleanup: () => Promise<void>;
}

const T0 = Date.UTC(2026, 2, 2, 6, 0, 0);
const MINUTE = 60_000;

function sample(tag: string, minute: number, value: number | null, quality = 192): SampleInput {
  return {
    tag,
    t: T0 + minute * MINUTE,
    value,
    quality,
    source: `test:${tag}`,
    receivedAt: T0 + minute * MINUTE + 500,
  };
}

async function expectCode(promise: Promise<unknown>, code: ErrorCode): Promise<void> {
  const error: unknown = await promise.then(
    () => new Error(`expected ${code}, but it succeeded`),
    (caught: unknown) => caught,
  );
  expect(isTrueshiftError(error) ? error.code : error).toBe(code);
}

const MARK: MarkInput = {
  tags: ['evap1.steam', 'evap1.brix'],
  at: T0 + 60 * MINUTE,
  label: 'New steam trap on evaporator 1',
  direction: 'fall',
  smallestShift: 0.5,
};

const TARGETS: readonly { channel: OutboxChannel; target: string; createdAt: number }[] = [
  { channel: 'webhook', target: 'https://plant.example/hooks/alerts', createdAt: T0 },
  { channel: 'mqtt', target: 'trueshift/alerts', createdAt: T0 },
];

export function describeStoreContract(name: string, open: () => Promise<OpenedStore>): void {
  describe(`Store contract: ${name}`, () => {
    let opened: OpenedStore;
    let store: Store;

    beforeEach(async () => {
      opened = await open();
      store = opened.store;
    });

    afterEach(async () => {
      await store.close();
      await opened.cleanup();
    });

    describe('tags', () => {
      it('creates a tag, then updates only the fields given and keeps createdAt', async () => {
        const created = await store.upsertTag(
          { name: 'evap1.steam', unit: 't/h', better: 'lower', settings: { nBefore: 40 } },
          T0,
        );
        expect(created).toEqual({
          name: 'evap1.steam',
          unit: 't/h',
          description: null,
          better: 'lower',
          validMin: null,
          validMax: null,
          settings: { nBefore: 40 },
          createdAt: T0,
          updatedAt: T0,
        });
        const updated = await store.upsertTag(
          { name: 'evap1.steam', description: 'Steam to effect 1', unit: null, validMin: 0 },
          T0 + MINUTE,
        );
        expect(updated).toEqual({
          ...created,
          unit: null,
          description: 'Steam to effect 1',
          validMin: 0,
          updatedAt: T0 + MINUTE,
        });
        expect(await store.getTag('evap1.steam')).toEqual(updated);
        expect(await store.getTag('no.such.tag')).toBeNull();
      });

      it('ensureTags creates the missing tags with defaults and leaves existing ones alone', async () => {
        await store.upsertTag({ name: 'b', unit: 'kPa', better: 'higher' }, T0);
        await store.ensureTags(['c', 'b', 'a'], T0 + MINUTE);
        const tags = await store.listTags();
        expect(tags.map((tag) => tag.name)).toEqual(['a', 'b', 'c']);
        expect(tags[0]).toEqual({
          name: 'a',
          unit: null,
          description: null,
          better: 'either',
          validMin: null,
          validMax: null,
          settings: {},
          createdAt: T0 + MINUTE,
          updatedAt: T0 + MINUTE,
        });
        expect(tags[1]).toMatchObject({ unit: 'kPa', better: 'higher', createdAt: T0 });
      });
    });

    describe('samples', () => {
      it('inserts new samples and treats a replay as a no-op', async () => {
        const batch = [sample('s', 0, 1.5), sample('s', 1, 2.5), sample('s', 2, null, 0)];
        expect(await store.writeSamples(batch)).toEqual({
          inserted: 3,
          duplicates: 0,
          conflicts: 0,
        });
        const seq = await store.lastSeq();
        expect(await store.writeSamples(batch)).toEqual({
          inserted: 0,
          duplicates: 3,
          conflicts: 0,
        });
        expect(await store.lastSeq()).toBe(seq);
        expect(await store.countSamples('s')).toBe(3);
        expect(await store.countQuarantine()).toBe(0);
      });

      it('quarantines a different value for a stored time and keeps the stored one', async () => {
        await store.writeSamples([sample('evap1.steam', 5, 12.25)]);
        const conflicting = sample('evap1.steam', 5, 13.75);
        expect(await store.writeSamples([conflicting])).toEqual({
          inserted: 0,
          duplicates: 0,
          conflicts: 1,
        });
        const columns = await store.readSamples('evap1.steam');
        expect(Array.from(columns.value)).toEqual([12.25]);

        const [entry, ...rest] = await store.listQuarantine();
        expect(rest).toEqual([]);
        expect(entry).toMatchObject({
          source: 'test:evap1.steam',
          code: 'SAMPLE_CONFLICT',
          tag: 'evap1.steam',
          receivedAt: conflicting.receivedAt,
        });
        expect(JSON.parse(entry?.raw ?? 'null')).toEqual(conflicting);
        expect(entry?.reason).toContain('12.25');
        expect(entry?.reason).toContain('13.75');
      });

      it('counts a quality change at the same time and value as a conflict', async () => {
        await store.writeSamples([sample('q', 0, 4, 192)]);
        expect(await store.writeSamples([sample('q', 0, 4, 0)])).toMatchObject({ conflicts: 1 });
        expect(Array.from((await store.readSamples('q')).quality)).toEqual([192]);
      });

      it('counts new, duplicate and conflicting samples of one mixed batch', async () => {
        await store.writeSamples([sample('m', 0, 1), sample('m', 1, 2), sample('n', 0, null)]);
        const result = await store.writeSamples([
          sample('m', 0, 1), // duplicate
          sample('m', 1, 2.5), // conflict
          sample('n', 0, null), // duplicate: no value both times
          sample('n', 1, 7), // new
          sample('m', 2, 3), // new
          sample('m', 2, 3), // duplicate of a sample earlier in the same batch
          sample('m', 2, 4), // conflict with a sample earlier in the same batch
          sample('n', 0, 0), // conflict: a value where the stored sample has none
        ]);
        expect(result).toEqual({ inserted: 2, duplicates: 3, conflicts: 3 });
        expect(await store.countQuarantine()).toBe(3);
        expect(Array.from((await store.readSamples('m')).value)).toEqual([1, 2, 3]);
        expect(Array.from((await store.readSamples('n')).value)).toEqual([Number.NaN, 7]);
      });

      it('creates unknown tags on the fly, dated by the first sample received', async () => {
        await store.writeSamples([sample('new.tag', 3, 1)]);
        expect(await store.getTag('new.tag')).toMatchObject({
          name: 'new.tag',
          better: 'either',
          settings: {},
          createdAt: T0 + 3 * MINUTE + 500,
        });
      });

      it('rejects a batch with an invalid sample and writes none of it', async () => {
        for (const bad of [
          { ...sample('v', 1, 1), t: Number.NaN },
          { ...sample('v', 1, 1), value: Number.POSITIVE_INFINITY },
          { ...sample('v', 1, 1), quality: 1.5 },
          { ...sample('v', 1, 1), tag: '' },
        ]) {
          await expectCode(store.writeSamples([sample('v', 0, 1), bad]), 'INVALID_ARGUMENT');
        }
        expect(await store.countSamples()).toBe(0);
        expect(await store.getTag('v')).toBeNull();
      });

      it('reads one tag in time order with from (inclusive), to (exclusive), goodOnly and limit', async () => {
        // Written out of order, and interleaved with another tag.
        await store.writeSamples([
          sample('r', 4, 40),
          sample('other', 0, -1),
          sample('r', 0, 0),
          sample('r', 2, 20, 0),
          sample('r', 1, null),
          sample('r', 3, 30),
          sample('r', 5, 50, 100),
        ]);
        const all = await store.readSamples('r');
        expect(all.t).toBeInstanceOf(Float64Array);
        expect(all.value).toBeInstanceOf(Float64Array);
        expect(all.quality).toBeInstanceOf(Int32Array);
        expect(Array.from(all.t)).toEqual([0, 1, 2, 3, 4, 5].map((m) => T0 + m * MINUTE));
        expect(Array.from(all.value)).toEqual([0, Number.NaN, 20, 30, 40, 50]);
        expect(Array.from(all.quality)).toEqual([192, 192, 0, 192, 192, 100]);

        const window = await store.readSamples('r', { from: T0 + MINUTE, to: T0 + 4 * MINUTE });
        expect(Array.from(window.value)).toEqual([Number.NaN, 20, 30]);

        const good = await store.readSamples('r', { goodOnly: true });
        expect(Array.from(good.value)).toEqual([0, 30, 40]);

        const latest = await store.readSamples('r', { limit: 2 });
        expect(Array.from(latest.value)).toEqual([40, 50]);
        const latestGood = await store.readSamples('r', {
          limit: 2,
          goodOnly: true,
          to: T0 + 4 * MINUTE,
        });
        expect(Array.from(latestGood.value)).toEqual([0, 30]);
        expect((await store.readSamples('r', { limit: 0 })).t.length).toBe(0);
        expect((await store.readSamples('r', { from: T0 + 9 * MINUTE })).t.length).toBe(0);
        expect((await store.readSamples('no.such.tag')).t.length).toBe(0);
      });

      it('reads long histories whole and in order, with and without a limit', async () => {
        const n = 20_000;
        for (let start = 0; start < n; start += 5_000) {
          const batch: SampleInput[] = [];
          for (let i = start; i < start + 5_000; i++) batch.push(sample('long', i, i / 4, 192));
          await store.writeSamples(batch);
        }
        const all = await store.readSamples('long');
        expect(all.t.length).toBe(n);
        let ordered = true;
        for (let i = 0; i < n; i++) {
          if (all.t[i] !== T0 + i * MINUTE || all.value[i] !== i / 4) ordered = false;
        }
        expect(ordered).toBe(true);
        const tail = await store.readSamples('long', { limit: 12_345 });
        expect(tail.t.length).toBe(12_345);
        expect(tail.value[0]).toBe((n - 12_345) / 4);
        expect(tail.value[12_344]).toBe((n - 1) / 4);
      });

      it('keeps samples with no value or bad quality, and counts them', async () => {
        await store.writeSamples([
          sample('k', 0, null, 192),
          sample('k', 1, 3, 0),
          sample('k', 2, 4, 500),
          sample('j', 0, 1),
        ]);
        expect(await store.countSamples('k')).toBe(3);
        expect(await store.countSamples()).toBe(4);
        expect(await store.countSamples('no.such.tag')).toBe(0);
        expect(Array.from((await store.readSamples('k', { goodOnly: true })).value)).toEqual([4]);
      });

      it('hands followers samples in insertion order and lets them resume', async () => {
        expect(await store.lastSeq()).toBe(0);
        expect(await store.samplesAfter(0, 10)).toEqual([]);
        await store.writeSamples([sample('b', 5, 1), sample('a', 1, 2)]);
        await store.writeSamples([sample('a', 0, 3), sample('a', 1, 2), sample('b', 0, null, 0)]);

        const first = await store.samplesAfter(0, 2);
        expect(first.map((s) => [s.tag, s.value])).toEqual([
          ['b', 1],
          ['a', 2],
        ]);
        const last = first[first.length - 1]?.seq ?? 0;
        const rest = await store.samplesAfter(last, 100);
        expect(rest).toEqual([
          { seq: expect.any(Number) as number, tag: 'a', t: T0, value: 3, quality: 192 },
          { seq: expect.any(Number) as number, tag: 'b', t: T0, value: null, quality: 0 },
        ]);
        const seqs = [...first, ...rest].map((s) => s.seq);
        expect(seqs).toEqual([...seqs].sort((x, y) => x - y));
        expect(new Set(seqs).size).toBe(4);
        expect(await store.lastSeq()).toBe(seqs[3]);
        expect(await store.samplesAfter(await store.lastSeq(), 100)).toEqual([]);
      });

      it('splits the follower stream by shard: each tag in the shard of its name, nothing twice', async () => {
        const names = Array.from({ length: 24 }, (_, i) => `kiln${i % 3}/zone${i}/temp`);
        await store.writeSamples(names.map((tag, i) => sample(tag, i, i)));
        await store.writeSamples(names.map((tag, i) => sample(tag, i + 30, i + 0.5)));
        const all = await store.samplesAfter(0, 1000);
        expect(all).toHaveLength(48);
        const seen: number[] = [];
        for (let shard = 0; shard < store.shards; shard++) {
          const part = await store.samplesAfter(0, 1000, shard);
          for (const s of part) expect(shardOf(s.tag, store.shards)).toBe(shard);
          const seqs = part.map((s) => s.seq);
          expect(seqs).toEqual([...seqs].sort((x, y) => x - y));
          seen.push(...seqs);
          // Resuming inside a shard picks up after the last seq seen there.
          const half = part[Math.floor(part.length / 2)];
          if (half !== undefined) {
            const rest = await store.samplesAfter(half.seq, 1000, shard);
            expect(rest).toEqual(part.filter((s) => s.seq > half.seq));
          }
        }
        expect(seen.sort((x, y) => x - y)).toEqual(all.map((s) => s.seq));
        await expectCode(store.samplesAfter(0, 10, store.shards), 'INVALID_ARGUMENT');
      });
    });

    describe('quarantine', () => {
      it('lists newest first, pages by id, filters by source and counts', async () => {
        for (let i = 0; i < 5; i++) {
          await store.quarantine([
            {
              source: i % 2 === 0 ? 'mqtt:a' : 'csv:b.csv',
              raw: `payload ${i}`,
              reason: `reason ${i}`,
              code: 'CSV_BAD_ROW',
              receivedAt: T0 + i,
            },
          ]);
        }
        expect(await store.countQuarantine()).toBe(5);
        const all = await store.listQuarantine();
        expect(all.map((entry) => entry.raw)).toEqual([4, 3, 2, 1, 0].map((i) => `payload ${i}`));
        expect(all[0]).toMatchObject({ tag: null, code: 'CSV_BAD_ROW', receivedAt: T0 + 4 });
        const page = await store.listQuarantine({ limit: 2, beforeId: all[1]?.id ?? 0 });
        expect(page.map((entry) => entry.raw)).toEqual(['payload 2', 'payload 1']);
        const mqtt = await store.listQuarantine({ source: 'mqtt:a' });
        expect(mqtt.map((entry) => entry.raw)).toEqual(['payload 4', 'payload 2', 'payload 0']);
      });

      it('cuts a raw payload to 64 KiB of UTF-8 without splitting a character', async () => {
        // "é" is two bytes of UTF-8; an odd prefix makes the 64 KiB boundary fall inside one.
        const raw = `x${'é'.repeat(70_000)}`;
        await store.quarantine([
          { source: 's', raw, reason: 'big', code: 'INVALID_ARGUMENT', tag: 't', receivedAt: T0 },
        ]);
        const [entry] = await store.listQuarantine();
        const kept = entry?.raw ?? '';
        expect(Buffer.byteLength(kept, 'utf8')).toBe(64 * 1024 - 1);
        expect(raw.startsWith(kept)).toBe(true);
        expect(entry?.tag).toBe('t');
      });
    });

    describe('marks', () => {
      it('creates a mark at revision 1 with defaults, and its tags', async () => {
        const mark = await store.createMark(MARK, 'ana', T0 + 90 * MINUTE);
        expect(mark).toEqual({
          id: expect.stringMatching(/^[0-9a-f-]{36}$/) as string,
          tags: ['evap1.steam', 'evap1.brix'],
          at: T0 + 60 * MINUTE,
          label: 'New steam trap on evaporator 1',
          note: '',
          direction: 'fall',
          smallestShift: 0.5,
          nBefore: null,
          nAfterCap: null,
          riskLevel: null,
          settlingMs: null,
          createdAt: T0 + 90 * MINUTE,
          updatedAt: T0 + 90 * MINUTE,
          withdrawnAt: null,
          revision: 1,
        });
        expect(await store.getMark(mark.id)).toEqual(mark);
        expect(await store.getMark('00000000-0000-0000-0000-000000000000')).toBeNull();
        expect((await store.listTags()).map((tag) => tag.name)).toEqual([
          'evap1.brix',
          'evap1.steam',
        ]);
        await expectCode(store.createMark({ ...MARK, tags: [] }, 'ana', T0), 'INVALID_ARGUMENT');
      });

      it('corrects and withdraws a mark, keeping every revision in full', async () => {
        const created = await store.createMark(MARK, 'ana', T0);
        const corrected = await store.correctMark(
          created.id,
          {
            at: T0 + 65 * MINUTE,
            smallestShift: null,
            note: 'Trap fitted at 07:05',
            tags: ['evap1.steam'],
          },
          'ben',
          'Fitter log says 07:05',
          T0 + MINUTE,
        );
        expect(corrected).toEqual({
          ...created,
          at: T0 + 65 * MINUTE,
          smallestShift: null,
          note: 'Trap fitted at 07:05',
          tags: ['evap1.steam'],
          updatedAt: T0 + MINUTE,
          revision: 2,
        });
        const withdrawn = await store.withdrawMark(
          created.id,
          'ana',
          'Trap was not fitted',
          T0 + 2 * MINUTE,
        );
        expect(withdrawn).toEqual({
          ...corrected,
          withdrawnAt: T0 + 2 * MINUTE,
          updatedAt: T0 + 2 * MINUTE,
          revision: 3,
        });
        expect(await store.getMark(created.id)).toEqual(withdrawn);

        const history = await store.markHistory(created.id);
        expect(history).toEqual([
          {
            markId: created.id,
            revision: 1,
            changedAt: T0,
            changedBy: 'ana',
            action: 'created',
            reason: '',
            mark: created,
          },
          {
            markId: created.id,
            revision: 2,
            changedAt: T0 + MINUTE,
            changedBy: 'ben',
            action: 'corrected',
            reason: 'Fitter log says 07:05',
            mark: corrected,
          },
          {
            markId: created.id,
            revision: 3,
            changedAt: T0 + 2 * MINUTE,
            changedBy: 'ana',
            action: 'withdrawn',
            reason: 'Trap was not fitted',
            mark: withdrawn,
          },
        ]);

        await expectCode(
          store.correctMark(created.id, { label: 'x' }, 'ben', 'late', T0 + 3 * MINUTE),
          'MARK_WITHDRAWN',
        );
        await expectCode(
          store.withdrawMark(created.id, 'ben', 'again', T0 + 3 * MINUTE),
          'MARK_WITHDRAWN',
        );
        await expectCode(
          store.correctMark('00000000-0000-0000-0000-000000000000', {}, 'ben', 'x', T0),
          'MARK_NOT_FOUND',
        );
        await expectCode(
          store.withdrawMark('00000000-0000-0000-0000-000000000000', 'ben', 'x', T0),
          'MARK_NOT_FOUND',
        );
        expect(await store.markHistory(created.id)).toHaveLength(3);
      });

      it('lists marks by time, by tag, and withdrawn ones only when asked', async () => {
        const late = await store.createMark(
          { ...MARK, at: T0 + 200 * MINUTE, label: 'late' },
          'a',
          T0,
        );
        const early = await store.createMark(
          { ...MARK, tags: ['evap2.steam'], at: T0 + 10 * MINUTE, label: 'early' },
          'a',
          T0,
        );
        const gone = await store.createMark({ ...MARK, at: T0, label: 'gone' }, 'a', T0);
        await store.withdrawMark(gone.id, 'a', 'mistake', T0 + 1);

        expect((await store.listMarks()).map((m) => m.label)).toEqual(['early', 'late']);
        expect((await store.listMarks({ includeWithdrawn: true })).map((m) => m.label)).toEqual([
          'gone',
          'early',
          'late',
        ]);
        expect((await store.listMarks({ tag: 'evap1.brix' })).map((m) => m.id)).toEqual([late.id]);
        expect((await store.listMarks({ tag: 'evap2.steam' })).map((m) => m.id)).toEqual([
          early.id,
        ]);
        expect(await store.listMarks({ tag: 'no.such.tag' })).toEqual([]);

        await store.correctMark(late.id, { tags: ['evap2.steam'] }, 'a', 'wrong tag', T0 + 2);
        expect((await store.listMarks({ tag: 'evap2.steam' })).map((m) => m.label)).toEqual([
          'early',
          'late',
        ]);
        expect(await store.listMarks({ tag: 'evap1.brix' })).toEqual([]);
      });
    });

    describe('evidence snapshots', () => {
      it('lists a mark and tag’s evidence in evaluation order, the latest last', async () => {
        const mark = await store.createMark(MARK, 'ana', T0);
        const add = (tag: string, evaluatedAt: number, verdict: string) =>
          store.addEvidenceSnapshot({
            markId: mark.id,
            tag,
            sampleTime: evaluatedAt - 1000,
            evaluatedAt,
            nAfter: 5,
            risk: verdict === 'still-gathering' ? null : 0.02,
            verdict,
            body: { verdict, shift: -0.8, windows: [1, 2, 3] },
          });
        const second = await add('evap1.steam', T0 + 2 * MINUTE, 'credible-fall');
        const first = await add('evap1.steam', T0 + MINUTE, 'still-gathering');
        const third = await add('evap1.steam', T0 + 3 * MINUTE, 'credible-fall');
        await add('evap1.brix', T0 + 9 * MINUTE, 'no-credible-shift');

        expect(first).toMatchObject({ id: expect.any(Number) as number, risk: null });
        expect(await store.listEvidenceSnapshots(mark.id, 'evap1.steam')).toEqual([
          first,
          second,
          third,
        ]);
        expect(await store.listEvidenceSnapshots(mark.id, 'evap1.steam', { limit: 2 })).toEqual([
          second,
          third,
        ]);
        expect(await store.latestEvidence(mark.id, 'evap1.steam')).toEqual(third);
        expect((await store.latestEvidence(mark.id, 'evap1.brix'))?.verdict).toBe(
          'no-credible-shift',
        );
        expect(await store.latestEvidence(mark.id, 'evap9.none')).toBeNull();
        await expectCode(
          store.addEvidenceSnapshot({ ...first, markId: '00000000-0000-0000-0000-000000000000' }),
          'MARK_NOT_FOUND',
        );
      });
    });

    describe('alerts', () => {
      const alert = {
        tag: 'evap1.steam',
        markId: null,
        kind: 'unmarked-shift' as const,
        dedupeKey: 'unmarked-shift:evap1.steam',
        title: 'Steam to effect 1 shifted down without a mark',
        at: T0,
        evidence: { risk: 0.01 },
      };

      it('opens an alert and queues its announcement in the same step', async () => {
        const { alert: opened, change } = await store.raiseAlert(alert, TARGETS);
        expect(change).toBe('opened');
        expect(opened).toEqual({
          id: expect.any(Number) as number,
          tag: 'evap1.steam',
          markId: null,
          kind: 'unmarked-shift',
          dedupeKey: 'unmarked-shift:evap1.steam',
          title: alert.title,
          state: 'open',
          openedAt: T0,
          updatedAt: T0,
          repeats: 0,
          acknowledgedAt: null,
          acknowledgedBy: null,
          note: null,
          clearedAt: null,
          evidence: { risk: 0.01 },
        });
        const outbox = await store.listOutbox();
        expect(outbox.map((e) => [e.channel, e.target, e.idempotencyKey, e.state])).toEqual([
          ['mqtt', 'trueshift/alerts', `alert:${opened.id}:opened:0`, 'pending'],
          [
            'webhook',
            'https://plant.example/hooks/alerts',
            `alert:${opened.id}:opened:0`,
            'pending',
          ],
        ]);
        expect(outbox[0]).toMatchObject({
          payload: { change: 'opened', alert: opened },
          createdAt: T0,
          nextAttemptAt: T0,
          attempts: 0,
          lastError: null,
          deliveredAt: null,
        });
        expect(await store.getAlert(opened.id)).toEqual(opened);
      });

      it('counts a repeat instead of opening another, and sends nothing for it', async () => {
        const { alert: opened } = await store.raiseAlert(alert, TARGETS);
        const repeat = await store.raiseAlert(
          { ...alert, at: T0 + MINUTE, evidence: { risk: 0.001 } },
          TARGETS,
        );
        expect(repeat.change).toBe('repeated');
        expect(repeat.alert).toEqual({
          ...opened,
          repeats: 1,
          updatedAt: T0 + MINUTE,
          evidence: { risk: 0.001 },
        });
        expect(await store.listOutbox()).toHaveLength(2);
        const other = await store.raiseAlert(
          { ...alert, dedupeKey: 'stale:evap1.steam', kind: 'stale' },
          [],
        );
        expect(other.change).toBe('opened');
        expect(other.alert.id).not.toBe(opened.id);
        expect(await store.listAlerts()).toHaveLength(2);
      });

      it('acknowledges and clears, announcing each, and refuses to touch a cleared alert', async () => {
        const { alert: opened } = await store.raiseAlert(alert, []);
        await store.raiseAlert({ ...alert, at: T0 + MINUTE }, []);
        const acked = await store.acknowledgeAlert(
          opened.id,
          'ana',
          'Looking at the trap',
          T0 + 2 * MINUTE,
          TARGETS.slice(0, 1),
        );
        expect(acked.change).toBe('acknowledged');
        expect(acked.alert).toMatchObject({
          state: 'acknowledged',
          acknowledgedAt: T0 + 2 * MINUTE,
          acknowledgedBy: 'ana',
          note: 'Looking at the trap',
          updatedAt: T0 + 2 * MINUTE,
          repeats: 1,
        });
        // A second acknowledgement (a retried request) answers without announcing again.
        const again = await store.acknowledgeAlert(
          opened.id,
          'ana',
          'again',
          T0 + 3 * MINUTE,
          TARGETS,
        );
        expect(again).toEqual(acked);
        // Still uncleared: a repeat while acknowledged counts on the same alert.
        expect((await store.raiseAlert({ ...alert, at: T0 + 4 * MINUTE }, TARGETS)).change).toBe(
          'repeated',
        );

        const cleared = await store.clearAlert(opened.id, T0 + 5 * MINUTE, TARGETS.slice(1));
        expect(cleared.change).toBe('cleared');
        expect(cleared.alert).toMatchObject({
          state: 'cleared',
          clearedAt: T0 + 5 * MINUTE,
          repeats: 2,
        });
        // Cleared without a note of its own: the acknowledgement's note stays.
        expect(cleared.alert.note).toBe(acked.alert.note);
        expect((await store.listOutbox()).map((e) => e.idempotencyKey)).toEqual([
          `alert:${opened.id}:cleared:2`,
          `alert:${opened.id}:acknowledged:1`,
        ]);
        expect((await store.listOutbox())[0]?.payload).toEqual({
          change: 'cleared',
          alert: cleared.alert,
        });

        await expectCode(
          store.acknowledgeAlert(opened.id, 'ben', 'late', T0 + 6 * MINUTE, []),
          'ALERT_CLEARED',
        );
        await expectCode(store.clearAlert(opened.id, T0 + 6 * MINUTE, []), 'ALERT_CLEARED');
        await expectCode(store.acknowledgeAlert(999_999, 'ben', 'x', T0, []), 'ALERT_NOT_FOUND');
        await expectCode(store.clearAlert(999_999, T0, []), 'ALERT_NOT_FOUND');

        // Once cleared, the same condition opens a new alert.
        const reopened = await store.raiseAlert({ ...alert, at: T0 + 7 * MINUTE }, []);
        expect(reopened.change).toBe('opened');
        expect(reopened.alert.id).not.toBe(opened.id);
        expect(reopened.alert.repeats).toBe(0);
        const withNote = await store.clearAlert(
          reopened.alert.id,
          T0 + 8 * MINUTE,
          [],
          'new probe',
        );
        expect(withNote.alert).toMatchObject({ state: 'cleared', note: 'new probe' });
      });

      it('stores neither the alert nor any outbox entry when queueing fails', async () => {
        const broken = [
          ...TARGETS,
          { channel: 'pigeon' as OutboxChannel, target: 'loft', createdAt: T0 },
        ];
        await expect(store.raiseAlert(alert, broken)).rejects.toThrow();
        expect(await store.listAlerts()).toEqual([]);
        expect(await store.listOutbox()).toEqual([]);
        await expectCode(
          store.raiseAlert({ ...alert, markId: '00000000-0000-0000-0000-000000000000' }, TARGETS),
          'MARK_NOT_FOUND',
        );
        expect(await store.listAlerts()).toEqual([]);
      });

      it('lists alerts newest first, by state and tag, with a limit', async () => {
        const a = await store.raiseAlert(alert, []);
        const b = await store.raiseAlert({ ...alert, tag: 'evap2.steam', dedupeKey: 'k2' }, []);
        const c = await store.raiseAlert({ ...alert, dedupeKey: 'k3', kind: 'stuck' }, []);
        await store.clearAlert(b.alert.id, T0 + 1, []);
        expect((await store.listAlerts()).map((x) => x.id)).toEqual([
          c.alert.id,
          b.alert.id,
          a.alert.id,
        ]);
        expect((await store.listAlerts({ state: 'open' })).map((x) => x.id)).toEqual([
          c.alert.id,
          a.alert.id,
        ]);
        expect((await store.listAlerts({ tag: 'evap2.steam' })).map((x) => x.id)).toEqual([
          b.alert.id,
        ]);
        expect(
          (await store.listAlerts({ state: 'open', tag: 'evap1.steam', limit: 1 })).map(
            (x) => x.id,
          ),
        ).toEqual([c.alert.id]);
      });
    });

    describe('outbox', () => {
      const entry = (key: string, createdAt: number): OutboxInput => ({
        channel: 'webhook',
        target: 'https://plant.example/hook',
        idempotencyKey: key,
        payload: { key },
        createdAt,
      });

      it('hands out due entries oldest first and follows failures, death and delivery', async () => {
        await store.enqueueOutbox([entry('a', T0), entry('b', T0 + 10), entry('c', T0 + 20)]);
        // The same message to the same target is queued once.
        await store.enqueueOutbox([entry('a', T0 + 30)]);
        expect(await store.listOutbox()).toHaveLength(3);

        expect((await store.dueOutbox(T0 + 10, 10)).map((e) => e.idempotencyKey)).toEqual([
          'a',
          'b',
        ]);
        expect((await store.dueOutbox(T0 + 100, 1)).map((e) => e.idempotencyKey)).toEqual(['a']);

        const [a, b, c] = await store.dueOutbox(T0 + 100, 10);
        if (a === undefined || b === undefined || c === undefined) throw new Error('three due');
        await store.markAttemptFailed(a.id, 'HTTP 503', T0 + 1000, false);
        await store.markAttemptFailed(b.id, 'HTTP 404', T0 + 1000, true);
        await store.markDelivered(c.id, T0 + 101);

        expect(await store.dueOutbox(T0 + 999, 10)).toEqual([]);
        const due = await store.dueOutbox(T0 + 1000, 10);
        expect(due).toEqual([
          { ...a, attempts: 1, lastError: 'HTTP 503', nextAttemptAt: T0 + 1000 },
        ]);
        expect(await store.listOutbox({ state: 'dead' })).toEqual([
          { ...b, state: 'dead', attempts: 1, lastError: 'HTTP 404', nextAttemptAt: T0 + 1000 },
        ]);
        expect(await store.listOutbox({ state: 'delivered' })).toEqual([
          { ...c, state: 'delivered', deliveredAt: T0 + 101 },
        ]);

        await store.markAttemptFailed(a.id, 'timeout', T0 + 5000, false);
        expect((await store.dueOutbox(T0 + 5000, 10))[0]).toMatchObject({
          attempts: 2,
          lastError: 'timeout',
        });
        await store.markDelivered(a.id, T0 + 5001);
        expect(await store.dueOutbox(T0 + 1e9, 10)).toEqual([]);
        expect(await store.listOutbox({ state: 'pending' })).toEqual([]);
        expect((await store.listOutbox({ limit: 2 })).map((e) => e.idempotencyKey)).toEqual([
          'c',
          'b',
        ]);
      });
    });

    describe('outbox counts', () => {
      it('counts entries in each state, zero for a state with none', async () => {
        expect(await store.countOutbox()).toEqual({ pending: 0, delivered: 0, dead: 0 });
        await store.enqueueOutbox(
          ['a', 'b', 'c', 'd'].map((key) => ({
            channel: 'mqtt' as const,
            target: 'trueshift/alerts',
            idempotencyKey: key,
            payload: null,
            createdAt: T0,
          })),
        );
        const [a, b] = await store.dueOutbox(T0, 10);
        if (a === undefined || b === undefined) throw new Error('two due');
        await store.markDelivered(a.id, T0 + 1);
        await store.markAttemptFailed(b.id, 'HTTP 400', T0 + 1, true);
        expect(await store.countOutbox()).toEqual({ pending: 2, delivered: 1, dead: 1 });
      });
    });

    describe('tokens', () => {
      const token = {
        id: 'tok-1',
        // SQL and JSON metacharacters, kept as given.
        name: `O'Brien"; DROP TABLE tokens; --`,
        hash: 'a'.repeat(64),
        scopes: ['read' as const, 'write' as const],
        createdAt: T0,
      };

      it('creates, finds by hash, lists and revokes once', async () => {
        expect(await store.createToken(token)).toEqual({ ...token, revokedAt: null });
        await store.createToken({
          id: 'tok-2',
          name: 'admin',
          hash: 'b'.repeat(64),
          scopes: ['admin'],
          createdAt: T0 + 1,
        });
        expect(await store.findTokenByHash('a'.repeat(64))).toEqual({ ...token, revokedAt: null });
        expect(await store.findTokenByHash('A'.repeat(64))).toBeNull();
        expect(await store.findTokenByHash('c'.repeat(64))).toBeNull();
        expect((await store.listTokens()).map((t) => t.id)).toEqual(['tok-1', 'tok-2']);

        expect(await store.revokeToken('tok-1', T0 + 10)).toEqual({ ...token, revokedAt: T0 + 10 });
        // Revoking again keeps the first time.
        expect((await store.revokeToken('tok-1', T0 + 20)).revokedAt).toBe(T0 + 10);
        expect((await store.findTokenByHash('a'.repeat(64)))?.revokedAt).toBe(T0 + 10);
        expect((await store.listTokens()).map((t) => t.revokedAt)).toEqual([T0 + 10, null]);
        await expectCode(store.revokeToken('nobody', T0), 'TOKEN_NOT_FOUND');
      });

      it('refuses a second token with the same hash', async () => {
        await store.createToken(token);
        const error: unknown = await store.createToken({ ...token, id: 'tok-3' }).then(
          () => null,
          (caught: unknown) => caught,
        );
        expect(error).toBeInstanceOf(Error);
        expect(await store.listTokens()).toHaveLength(1);
      });
    });

    describe('analyser state', () => {
      it('saves, replaces, loads and lists by prefix', async () => {
        await store.saveAnalyserState([
          { key: 'evap1.steam', state: { cusum: [0, 1.5] }, lastSeq: 10, updatedAt: T0 },
          { key: 'mark:m1:evap1.steam', state: { n: 4 }, lastSeq: 10, updatedAt: T0 },
          { key: 'mark:m1:evap1.brix', state: { n: 2 }, lastSeq: 9, updatedAt: T0 },
          { key: 'mark:m2:evap1.brix', state: null, lastSeq: 3, updatedAt: T0 },
        ]);
        await store.saveAnalyserState([
          { key: 'evap1.steam', state: { cusum: [0.5, 0] }, lastSeq: 12, updatedAt: T0 + 1 },
        ]);
        expect(await store.loadAnalyserState('evap1.steam')).toEqual({
          key: 'evap1.steam',
          state: { cusum: [0.5, 0] },
          lastSeq: 12,
          updatedAt: T0 + 1,
        });
        expect(await store.loadAnalyserState('nothing')).toBeNull();
        expect((await store.listAnalyserState('mark:m1:')).map((r) => r.key)).toEqual([
          'mark:m1:evap1.brix',
          'mark:m1:evap1.steam',
        ]);
        expect(await store.listAnalyserState()).toHaveLength(4);
        expect((await store.loadAnalyserState('mark:m2:evap1.brix'))?.state).toBeNull();
      });

      it('refuses to save under a lease it does not hold, and saves nothing then', async () => {
        await expectCode(
          store.saveAnalyserState([{ key: 'fenced', state: 1, lastSeq: 1, updatedAt: T0 }], {
            shard: 0,
            owner: 'nobody',
            epoch: 1,
          }),
          'LEASE_LOST',
        );
        expect(await store.loadAnalyserState('fenced')).toBeNull();
      });
    });

    describe('files', () => {
      it('records a file content once', async () => {
        const file = {
          hash: 'sha256:ab12',
          name: 'history.csv',
          takenAt: T0,
          summary: { rows: 10 },
        };
        expect(await store.recordFile(file)).toBe(true);
        expect(
          await store.recordFile({ ...file, name: 'copy-of-history.csv', takenAt: T0 + 1 }),
        ).toBe(false);
        expect(await store.recordFile({ ...file, hash: 'sha256:cd34' })).toBe(true);
      });
    });

    describe('persistence', () => {
      it('keeps everything across close and reopen, and seq keeps rising', async (context) => {
        const { reopen } = opened;
        if (reopen === undefined) {
          context.skip();
          return;
        }
        await store.upsertTag({ name: 'p', unit: 'bar' }, T0);
        await store.writeSamples([sample('p', 0, 1), sample('p', 1, null, 0)]);
        const mark = await store.createMark(MARK, 'ana', T0);
        await store.correctMark(mark.id, { label: 'fixed' }, 'ana', 'typo', T0 + 1);
        await store.addEvidenceSnapshot({
          markId: mark.id,
          tag: 'p',
          sampleTime: T0,
          evaluatedAt: T0,
          nAfter: 1,
          risk: 0.5,
          verdict: 'still-gathering',
          body: { a: 1 },
        });
        const { alert: raised } = await store.raiseAlert(
          {
            tag: 'p',
            markId: mark.id,
            kind: 'credible-shift',
            dedupeKey: 'd',
            title: 't',
            at: T0,
            evidence: {},
          },
          TARGETS,
        );
        await store.quarantine([
          { source: 's', raw: 'r', reason: 'x', code: 'CSV_BAD_ROW', receivedAt: T0 },
        ]);
        await store.saveAnalyserState([{ key: 'p', state: { s: 1 }, lastSeq: 2, updatedAt: T0 }]);
        await store.recordFile({ hash: 'h', name: 'n', takenAt: T0, summary: null });
        const seq = await store.lastSeq();
        const before = {
          tags: await store.listTags(),
          samples: await store.samplesAfter(0, 100),
          marks: await store.listMarks(),
          history: await store.markHistory(mark.id),
          evidence: await store.listEvidenceSnapshots(mark.id, 'p'),
          alerts: await store.listAlerts(),
          outbox: await store.listOutbox(),
          quarantine: await store.listQuarantine(),
          state: await store.listAnalyserState(),
        };
        await store.close();

        store = await reopen();
        expect({
          tags: await store.listTags(),
          samples: await store.samplesAfter(0, 100),
          marks: await store.listMarks(),
          history: await store.markHistory(mark.id),
          evidence: await store.listEvidenceSnapshots(mark.id, 'p'),
          alerts: await store.listAlerts(),
          outbox: await store.listOutbox(),
          quarantine: await store.listQuarantine(),
          state: await store.listAnalyserState(),
        }).toEqual(before);
        expect(Array.from((await store.readSamples('p')).value)).toEqual([1, Number.NaN]);
        expect(await store.recordFile({ hash: 'h', name: 'n', takenAt: T0, summary: null })).toBe(
          false,
        );
        expect(
          (await store.raiseAlert({ ...raised, markId: mark.id, at: T0 + 1 }, [])).change,
        ).toBe('repeated');

        await store.writeSamples([sample('p', 2, 3)]);
        const [next] = await store.samplesAfter(seq, 10);
        expect(next?.seq).toBeGreaterThan(seq);
      });
    });
  });
}
