import { setFlagsFromString } from 'node:v8';
import { runInNewContext } from 'node:vm';
import { describe, expect, it } from 'vitest';
import { Sink, type SinkAdapter } from '../src/index.js';
import { ManualClock, settle } from '../src/testing.js';
import { deferred, seeded, Transient } from './fakes.js';

interface Ev {
  key: string;
  seq: number;
}

/** A full collection, from a test run without --expose-gc. */
function collectGarbage(): void {
  setFlagsFromString('--expose-gc');
  (runInNewContext('gc') as () => void)();
}

describe('the buffer', () => {
  it('lets go of written records at once, while the sink stays open', async () => {
    // An adapter that keeps nothing: whatever stays reachable is held by the engine.
    const adapter: SinkAdapter<{ dockId: number }> = {
      kind: 'keeps-nothing',
      write: async () => {},
      classify: () => 'fatal',
    };
    const sink = new Sink(adapter, { maxRecords: 100, maxAgeMs: 60_000, idleMs: 0 });
    const refs: WeakRef<object>[] = [];
    // Made outside this async function, whose suspended frame could hold the last one.
    const writeOne = (i: number) => {
      const record = { dockId: i };
      refs.push(new WeakRef(record));
      return sink.write(record);
    };
    for (let i = 0; i < 3000; i++) await writeOne(i);
    await sink.flush();
    expect(sink.counters().written).toBe(3000);
    // WeakRef targets stay alive until the current job ends.
    await new Promise((resolve) => setImmediate(resolve));
    collectGarbage();
    const alive = refs.filter((r) => r.deref() !== undefined).length;
    expect(alive).toBe(0);
    await sink.close();
  });

  // A burst taken in parts (the buffer holds more than a batch while the slot is busy), with a
  // ring small enough to renew its columns per batch, and with one larger than that (cleared in
  // place, see RecordBuffer.cut()): both write every record once, in order, and hold none after.
  for (const maxRecords of [100, 10_000]) {
    it(`writes a burst taken in parts in order and lets go of it (batches of ${maxRecords})`, async () => {
      const seen: number[] = [];
      const adapter: SinkAdapter<{ dockId: number }> = {
        kind: 'keeps-ids',
        write: async (batch) => {
          await new Promise((resolve) => setImmediate(resolve));
          for (const r of batch.records) seen.push(r.dockId);
        },
        classify: () => 'fatal',
      };
      const sink = new Sink(adapter, { maxRecords, maxAgeMs: 60_000, idleMs: 0 });
      const total = maxRecords * 5 + 7;
      const refs: WeakRef<object>[] = [];
      // Made outside this async function, whose suspended frame could hold the last one.
      const writeOne = (i: number): Promise<void> | undefined => {
        const record = { dockId: i };
        refs.push(new WeakRef(record));
        return sink.tryWrite(record) ? undefined : sink.write(record);
      };
      let tookInParts = false;
      for (let i = 0; i < total; i++) {
        if (sink.counters().bufferedRecords > maxRecords) tookInParts = true;
        const waiting = writeOne(i);
        if (waiting) await waiting;
      }
      await sink.flush();
      expect(tookInParts).toBe(true);
      expect(seen).toEqual(Array.from({ length: total }, (_, i) => i));
      await new Promise((resolve) => setImmediate(resolve));
      collectGarbage();
      expect(refs.filter((r) => r.deref() !== undefined)).toHaveLength(0);
      await sink.close();
    });
  }

  it('lets go of the records a partial write landed while the rest of the batch waits out a retry', async () => {
    const retryHeld = deferred();
    let calls = 0;
    let secondCall: () => void = () => {};
    const secondCallSeen = new Promise<void>((resolve) => (secondCall = resolve));
    // Keeps nothing; the first write lands every record but the first, the retry is held open.
    const adapter: SinkAdapter<{ dockId: number }> = {
      kind: 'partial',
      write: async () => {
        calls++;
        if (calls === 1) return { rejected: [{ index: 0, error: new Transient('dock 0 busy') }] };
        secondCall();
        await retryHeld.promise;
        return undefined;
      },
      classify: (error) => (error instanceof Transient ? 'retry' : 'fatal'),
    };
    const sink = new Sink(adapter, {
      maxRecords: 100,
      maxAgeMs: 60_000,
      idleMs: 0,
      retry: { baseDelayMs: 0 },
    });
    const refs: WeakRef<object>[] = [];
    const writeOne = (i: number) => {
      const record = { dockId: i };
      refs.push(new WeakRef(record));
      return sink.write(record);
    };
    for (let i = 0; i < 100; i++) await writeOne(i);
    await secondCallSeen;
    expect(sink.counters()).toMatchObject({ written: 99, inFlightRecords: 1 });
    await new Promise((resolve) => setImmediate(resolve));
    collectGarbage();
    const alive = refs.map((r, i) => (r.deref() === undefined ? -1 : i)).filter((i) => i >= 0);
    // Only the record being retried is still held.
    expect(alive).toEqual([0]);
    retryHeld.resolve();
    await sink.close();
    expect(sink.counters()).toMatchObject({ written: 100, accepted: 100 });
  });

  it('keeps each key in accept order and writes every record once while it grows, wraps and skips busy keys', async () => {
    const clock = new ManualClock();
    const random = seeded(11);
    const written: Ev[] = [];
    const adapter: SinkAdapter<Ev> = {
      kind: 'slow-store',
      write: async (batch) => {
        await settle(1 + Math.floor(random() * 4));
        written.push(...batch.records);
      },
      classify: () => 'fatal',
    };
    const sink = new Sink(adapter, {
      maxRecords: 40,
      maxPendingRecords: 2000,
      concurrency: 3,
      maxAgeMs: 5,
      idleMs: 0,
      clock,
      orderingKey: (r) => r.key,
    });
    const keys = Array.from({ length: 6 }, (_, i) => `dock-${i}`);
    const seq = new Map<string, number>();
    let peakBuffered = 0;
    for (let i = 0; i < 4000; i++) {
      // Mostly one busy dock, so takes often skip its records and close up the rest behind them.
      const key = random() < 0.5 ? 'dock-0' : keys[Math.floor(random() * keys.length)]!;
      const n = (seq.get(key) ?? 0) + 1;
      seq.set(key, n);
      if (!sink.tryWrite({ key, seq: n })) await sink.write({ key, seq: n });
      peakBuffered = Math.max(peakBuffered, sink.counters().bufferedRecords);
      if (i % 200 === 0) await clock.advance(1);
    }
    const done = sink.flush();
    for (let i = 0; i < 5000 && sink.counters().pendingRecords > 0; i++) await clock.advance(5);
    await done;
    // The ring starts at 64 slots: it must have grown for this test to mean anything.
    expect(peakBuffered).toBeGreaterThan(200);
    expect(written).toHaveLength(4000);
    for (const key of keys) {
      const got = written.filter((e) => e.key === key).map((e) => e.seq);
      expect(got).toEqual(Array.from({ length: seq.get(key) ?? 0 }, (_, i) => i + 1));
    }
    await sink.close();
  });
});

describe('the metas column of records written without metas', () => {
  it('is one undefined per record of each batch and settlement, whatever their sizes, and cannot be written to', async () => {
    const seen: Array<{ records: number; metas: readonly unknown[] }> = [];
    const adapter: SinkAdapter<number> = {
      kind: 'records-metas',
      write: async (batch) => {
        seen.push({ records: batch.records.length, metas: batch.metas });
      },
      classify: () => 'fatal',
    };
    const sink = new Sink(adapter, { maxRecords: 4, maxAgeMs: 60_000, idleMs: 0 });
    const settled: Array<readonly unknown[]> = [];
    sink.on('settled', (e) => settled.push(e.metas));
    for (let i = 0; i < 10; i++) await sink.write(i); // batches of 4, 4, then 2 at close
    await sink.close();
    expect(seen.map((b) => b.records)).toEqual([4, 4, 2]);
    for (const b of seen) {
      expect(b.metas).toHaveLength(b.records);
      expect(b.metas.every((m) => m === undefined)).toBe(true);
      expect(Object.isFrozen(b.metas)).toBe(true);
    }
    expect(settled.map((m) => m.length)).toEqual([4, 4, 2]);
    expect(settled.every((m) => m.every((x) => x === undefined))).toBe(true);
    expect(() => (seen[0]!.metas as unknown[]).push({})).toThrow(TypeError);
  });
});
