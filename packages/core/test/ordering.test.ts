import { describe, expect, it } from 'vitest';
import { ManualClock, Sink, settle } from '../src/index.js';
import { FakeAdapter, Transient, seeded } from './fakes.js';

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
      await new Promise((r) => setTimeout(r, random() * 3));
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
      retry: { baseDelayMs: 1, maxDelayMs: 2, maxAttempts: Number.POSITIVE_INFINITY, maxElapsedMs: Number.POSITIVE_INFINITY },
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
    for (let i = 0; i < 2000 && sink.snapshot().pendingRecords > 0; i++) {
      await clock.advance(5);
      await new Promise((r) => setTimeout(r, 1));
    }
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
    const sink = new Sink(adapter, { maxRecords: 2, concurrency: 3, maxPendingRecords: 100, clock, idleMs: 0 });
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
