import { describe, expect, it } from 'vitest';
import { Sink } from '../src/index.js';
import { ManualClock, settle } from '../src/testing.js';
import { deferred, FakeAdapter } from './fakes.js';

function setup(options: Record<string, unknown> = {}) {
  const clock = new ManualClock();
  const adapter = new FakeAdapter<number>();
  adapter.now = () => clock.now();
  const sink = new Sink(adapter, { maxRecords: 10, maxAgeMs: 500, idleMs: 0, clock, ...options });
  return { clock, adapter, sink };
}

describe('flush triggers', () => {
  it('flushes a full batch at once, without waiting for the timer (size)', async () => {
    const { adapter, sink } = setup();
    for (let i = 0; i < 10; i++) await sink.write(i);
    await settle();
    expect(adapter.calls).toHaveLength(1);
    expect(adapter.calls[0]!.reason).toBe('size');
    expect(adapter.calls[0]!.records).toEqual([0, 1, 2, 3, 4, 5, 6, 7, 8, 9]);
  });

  it('flushes when the estimated bytes reach maxBytes (bytes)', async () => {
    const { adapter, sink } = setup({ maxBytes: 100, estimateBytes: () => 40 });
    await sink.write(1);
    await sink.write(2);
    await settle();
    expect(adapter.calls).toHaveLength(0);
    await sink.write(3);
    await settle();
    // 3 × 40 ≥ 100 triggers; the batch holds what fits under maxBytes, the rest follows.
    expect(adapter.calls.map((c) => c.reason)).toContain('bytes');
    expect(adapter.calls[0]!.records).toEqual([1, 2]);
  });

  it('sends a single record on a silent stream after maxAgeMs (age)', async () => {
    const { clock, adapter, sink } = setup({ maxAgeMs: 500 });
    await sink.write(42);
    await clock.advance(499);
    expect(adapter.calls).toHaveLength(0);
    await clock.advance(1);
    expect(adapter.calls).toHaveLength(1);
    expect(adapter.calls[0]).toMatchObject({ reason: 'age', records: [42], startedAt: 500 });
    expect(sink.snapshot().written).toBe(1);
  });

  it('flushes the tail of a burst after idleMs (idle)', async () => {
    const { clock, adapter, sink } = setup({ maxRecords: 100, maxAgeMs: 1000, idleMs: 50 });
    for (let i = 0; i < 30; i++) {
      await sink.write(i);
      await clock.advance(5);
    }
    // The burst lasted 150 ms; the last write was 5 ms ago. 45 ms more of silence → idle flush.
    expect(adapter.calls).toHaveLength(0);
    await clock.advance(44);
    expect(adapter.calls).toHaveLength(0);
    await clock.advance(1);
    expect(adapter.calls).toHaveLength(1);
    expect(adapter.calls[0]!.reason).toBe('idle');
    expect(adapter.calls[0]!.records).toHaveLength(30);
  });

  it('keeps the age bound on a steady trickle that never goes idle', async () => {
    const { clock, adapter, sink } = setup({ maxRecords: 1000, maxAgeMs: 200, idleMs: 50 });
    for (let i = 0; i < 100; i++) {
      await sink.write(i);
      await clock.advance(20); // every 20 ms: never idle for 50 ms
    }
    expect(adapter.calls.length).toBeGreaterThanOrEqual(9);
    for (const call of adapter.calls) expect(call.reason).toBe('age');
    // Each batch started no later than maxAgeMs after its first record was accepted.
    for (const call of adapter.calls) {
      const acceptedAt = (call.records[0] as number) * 20;
      expect(call.startedAt - acceptedAt).toBeLessThanOrEqual(200);
    }
  });

  it('arms at most one flush timer however many records are buffered', async () => {
    const { clock, sink } = setup({ maxRecords: 10_000, idleMs: 100 });
    for (let i = 0; i < 500; i++) {
      await sink.write(i);
      expect(clock.pendingTimers).toBeLessThanOrEqual(1);
    }
    expect(clock.pendingTimers).toBe(1);
  });

  it('flush() sends everything now (manual) and resolves once it is durable', async () => {
    const { adapter, sink } = setup({ maxRecords: 100 });
    for (let i = 0; i < 5; i++) await sink.write(i);
    await sink.flush();
    expect(adapter.stored).toEqual([0, 1, 2, 3, 4]);
    expect(adapter.calls[0]!.reason).toBe('manual');
    expect(sink.snapshot().flushes.manual).toBe(1);
  });

  it('flush() waits for batches already in flight', async () => {
    const { adapter, sink } = setup({ maxRecords: 2 });
    const gate = deferred();
    adapter.behave = () => gate.promise;
    await sink.write(1);
    await sink.write(2);
    await settle();
    let flushed = false;
    const f = sink.flush().then(() => {
      flushed = true;
    });
    await settle();
    expect(flushed).toBe(false);
    gate.resolve();
    await f;
    expect(flushed).toBe(true);
  });

  it('revoke() flushes only the matching partitions (revoke) and leaves the rest buffered', async () => {
    const { adapter, sink } = setup({ maxRecords: 100, maxAgeMs: 10_000 });
    await sink.write(1, { topic: 't', partition: 0, offset: 10 });
    await sink.write(2, { topic: 't', partition: 1, offset: 20 });
    await sink.write(3, { topic: 't', partition: 0, offset: 11 });
    await sink.revoke((m) => m?.partition === 0);
    expect(adapter.calls).toHaveLength(1);
    expect(adapter.calls[0]!.reason).toBe('revoke');
    // The batch leaves from the head, so it carries the partition-0 records and what sits between.
    expect(adapter.stored).toContain(1);
    expect(adapter.stored).toContain(3);
    expect(sink.progress.committable('t:0')).toBe(12n);
  });

  it('counts flushes by reason in the snapshot', async () => {
    const { clock, sink } = setup({ maxRecords: 2, maxAgeMs: 100 });
    await sink.write(1);
    await sink.write(2); // size
    await sink.write(3);
    await clock.advance(100); // age
    await sink.write(4);
    await sink.flush(); // manual
    const { flushes } = sink.snapshot();
    expect(flushes).toMatchObject({ size: 1, age: 1, manual: 1, idle: 0 });
  });
});

describe('counters()', () => {
  it('gives the gauges and counters of snapshot() without the distributions', async () => {
    const { sink } = setup({ maxRecords: 3 });
    for (let i = 0; i < 7; i++) await sink.write(i);
    await sink.flush();
    const {
      batchRecords,
      batchBytes,
      flushDurationMs,
      acceptToDurableMs,
      eventToDurableMs,
      slotWaitMs,
      backpressureWaitMs,
      ...rest
    } = sink.snapshot();
    expect(sink.counters()).toEqual(rest);
    expect(batchRecords.count).toBe(3);
    expect(rest).toMatchObject({ accepted: 7, written: 7, batches: 3 });
  });
});
