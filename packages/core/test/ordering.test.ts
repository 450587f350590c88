import { describe, expect, it } from 'vitest';
import { Sink } from '../src/index.js';
import { ManualClock, settle } from '../src/testing.js';
import { FakeAdapter, seeded, Transient } from './fakes.js';

interface Ev {
  key: string;
  seq: number;
}

describe('ordering and concurrency', () => {
  it('never has two batches of one key in flight, and writes each key in accept order', async () => {
    const clock = new ManualClock();
    const adapter = new FakeAdapter<Ev>();
    const random = seeded(7);
    const inFlightKeys = new Map<string, number>();
    let violations = 0;
    adapter.behave = async (batch) => {
      const keys = new Set(batch.records.map((r) => r.key));
      for (const k of keys) {
        if ((inFlightKeys.get(k) ?? 0) > 0) violations++;
        inFlightKeys.set(k, (inFlightKeys.get(k) ?? 0) + 1);
      }
      await settle(1 + Math.floor(random() * 3)); // a store that answers after a few turns
      if (random() < 0.2) {
        for (const k of keys) inFlightKeys.set(k, inFlightKeys.get(k)! - 1);
        throw new Transient('flaky');
      }
      for (const k of keys) inFlightKeys.set(k, inFlightKeys.get(k)! - 1);
    };
    const sink = new Sink(adapter, {
      maxRecords: 7,
      concurrency: 4,
      maxAgeMs: 10,
      idleMs: 0,
      clock,
      retry: {
        baseDelayMs: 1,
        maxDelayMs: 2,
        maxAttempts: Number.POSITIVE_INFINITY,
        maxElapsedMs: Number.POSITIVE_INFINITY,
      },
      orderingKey: (r) => r.key,
    });
    const keys = Array.from({ length: 20 }, (_, i) => `dock-${i}`);
    const seq = new Map<string, number>();
    for (let i = 0; i < 500; i++) {
      const key = keys[Math.floor(random() * keys.length)]!;
      const n = (seq.get(key) ?? 0) + 1;
      seq.set(key, n);
      await sink.write({ key, seq: n });
      if (i % 10 === 0) await clock.advance(1);
    }
    const done = sink.flush();
    for (let i = 0; i < 2000 && sink.counters().pendingRecords > 0; i++) await clock.advance(5);
    await done;
    expect(violations).toBe(0);
    expect(adapter.maxInFlight).toBeGreaterThan(1);
    expect(adapter.maxInFlight).toBeLessThanOrEqual(4);
    for (const key of keys) {
      const got = adapter.stored.filter((r) => r.key === key).map((r) => r.seq);
      expect(got).toEqual(Array.from({ length: seq.get(key) ?? 0 }, (_, i) => i + 1));
    }
  });

  it('runs records without a key in parallel batches up to the concurrency', async () => {
    const clock = new ManualClock();
    const adapter = new FakeAdapter<number>();
    const gate: Array<() => void> = [];
    adapter.behave = () => new Promise<void>((r) => gate.push(r));
    const sink = new Sink(adapter, {
      maxRecords: 2,
      concurrency: 3,
      maxPendingRecords: 100,
      clock,
      idleMs: 0,
    });
    for (let i = 0; i < 10; i++) await sink.write(i);
    await settle();
    expect(adapter.inFlight).toBe(3);
    for (let i = 0; i < 10; i++) {
      for (const r of gate.splice(0)) r();
      await settle();
    }
    expect(adapter.inFlight).toBe(0);
    expect(adapter.stored.sort((a, b) => a - b)).toEqual([0, 1, 2, 3, 4, 5, 6, 7, 8, 9]);
  });
});

describe('key locks of a batch whose keys come in runs', () => {
  it('holds every key of a batch, in however many runs it appears, until that whole batch ends', async () => {
    const clock = new ManualClock();
    const adapter = new FakeAdapter<{ key: string | undefined; seq: number }>();
    const gates: Array<() => void> = [];
    adapter.behave = () => new Promise<void>((r) => gates.push(r));
    const sink = new Sink(adapter, {
      maxRecords: 6,
      concurrency: 3,
      maxPendingRecords: 100,
      maxAgeMs: 500,
      idleMs: 0,
      clock,
      orderingKey: (r) => r.key,
    });
    // Batch 1: key a in two runs, key b in one, and a record without a key between them.
    for (const key of ['a', 'a', 'b', undefined, 'a', 'b']) await sink.write({ key, seq: 1 });
    await settle();
    expect(adapter.calls).toHaveLength(1);
    // One more record of a and b each, then a full batch's worth of c: only the c records may go.
    await sink.write({ key: 'a', seq: 2 });
    await sink.write({ key: 'b', seq: 2 });
    for (let i = 0; i < 6; i++) await sink.write({ key: 'c', seq: 2 });
    await settle();
    expect(adapter.calls).toHaveLength(2);
    expect(adapter.calls[1]!.records.map((r) => r.key)).toEqual(['c', 'c', 'c', 'c', 'c', 'c']);
    // The c batch ends first: a and b stay locked by batch 1 (a's second run counted too).
    gates[1]!();
    await settle();
    const flushed = sink.flush();
    await settle();
    expect(adapter.calls).toHaveLength(2);
    // Batch 1 ends: both keys are free again and their records leave.
    gates[0]!();
    await settle();
    expect(adapter.calls).toHaveLength(3);
    expect(adapter.calls[2]!.records).toEqual([
      { key: 'a', seq: 2 },
      { key: 'b', seq: 2 },
    ]);
    gates[2]!();
    await flushed;
    // Batch 3's keys are unlocked in turn: a later record of a goes out on its own.
    await sink.write({ key: 'a', seq: 3 });
    const last = sink.flush();
    await settle();
    expect(adapter.calls).toHaveLength(4);
    gates[3]!();
    await last;
    expect(adapter.stored.filter((r) => r.key === 'a').map((r) => r.seq)).toEqual([1, 1, 1, 2, 3]);
  });
});

describe('batching while keys are busy', () => {
  it('does not leak small batches of free keys while a busy key holds the size trigger', async () => {
    const clock = new ManualClock();
    const adapter = new FakeAdapter<Ev>();
    const gates: Array<() => void> = [];
    adapter.behave = () => new Promise<void>((r) => gates.push(r));
    const sink = new Sink(adapter, {
      maxRecords: 10,
      concurrency: 2,
      maxPendingRecords: 100,
      maxAgeMs: 500,
      idleMs: 0,
      clock,
      orderingKey: (r) => r.key,
    });
    // 10 records of the busy key go out by size and stay in flight.
    for (let i = 1; i <= 10; i++) await sink.write({ key: 'busy', seq: i });
    await settle();
    expect(adapter.calls).toHaveLength(1);
    // 10 more of the busy key keep the buffer full; two records of a quiet key arrive among them.
    for (let i = 11; i <= 15; i++) await sink.write({ key: 'busy', seq: i });
    await sink.write({ key: 'quiet', seq: 1 });
    for (let i = 16; i <= 20; i++) await sink.write({ key: 'busy', seq: i });
    await sink.write({ key: 'quiet', seq: 2 });
    await settle();
    // The free slot does not carry a two-record batch of the quiet key out by size …
    expect(adapter.calls).toHaveLength(1);
    // … but the quiet key still leaves by age while the busy key is in flight.
    await clock.advance(500);
    expect(adapter.calls).toHaveLength(2);
    expect(adapter.calls[1]).toMatchObject({
      reason: 'age',
      records: [
        { key: 'quiet', seq: 1 },
        { key: 'quiet', seq: 2 },
      ],
    });
    const done = sink.flush();
    for (let i = 0; i < 50 && sink.counters().pendingRecords > 0; i++) {
      for (const g of gates.splice(0)) g();
      await clock.advance(10);
    }
    await done;
    expect(adapter.stored.filter((r) => r.key === 'busy').map((r) => r.seq)).toEqual(
      Array.from({ length: 20 }, (_, i) => i + 1),
    );
  });
});
