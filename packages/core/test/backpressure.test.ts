import { describe, expect, it } from 'vitest';
import { settle } from '../src/testing.js';
import { gatedSink } from './fakes.js';

describe('backpressure', () => {
  it('resolves write() at once while there is room and waits when the pending bound is reached', async () => {
    const { sink, gates } = gatedSink();
    for (let i = 0; i < 4; i++) await sink.write(i); // two batches in flight or buffered: 4 pending
    let fifthAccepted = false;
    const fifth = sink.write(4).then(() => {
      fifthAccepted = true;
    });
    await settle();
    expect(fifthAccepted).toBe(false);
    expect(sink.snapshot()).toMatchObject({ pendingRecords: 4, waitingWriters: 1 });
    gates[0]!.resolve();
    await fifth;
    expect(fifthAccepted).toBe(true);
    expect(sink.snapshot().backpressureWaits).toBe(1);
  });

  it('never holds more than the bound, whatever the producer does', async () => {
    const { sink, gates } = gatedSink();
    const writes = Array.from({ length: 20 }, (_, i) => sink.write(i));
    let maxPending = 0;
    for (let round = 0; round < 20; round++) {
      await settle();
      maxPending = Math.max(maxPending, sink.snapshot().pendingRecords);
      for (const g of gates.splice(0)) g.resolve();
    }
    await Promise.all(writes);
    await sink.flush();
    expect(maxPending).toBeLessThanOrEqual(4);
    expect(sink.snapshot().written).toBe(20);
  });

  it('tryWrite() is the synchronous fast path: true while there is room, false when full', async () => {
    const { sink } = gatedSink();
    const results = Array.from({ length: 6 }, (_, i) => sink.tryWrite(i));
    expect(results).toEqual([true, true, true, true, false, false]);
  });

  it('cancels a waiting write with an AbortSignal', async () => {
    const { sink } = gatedSink();
    for (let i = 0; i < 4; i++) await sink.write(i);
    const controller = new AbortController();
    const waiting = sink.write(99, undefined, { signal: controller.signal });
    controller.abort();
    await expect(waiting).rejects.toMatchObject({ code: 'SPILLWAY_ABORTED' });
    expect(sink.snapshot()).toMatchObject({ waitingWriters: 0, accepted: 4 });
  });

  it('lets waiting writers in first-come first-served', async () => {
    const { sink, gates } = gatedSink();
    for (let i = 0; i < 4; i++) await sink.write(i);
    const order: number[] = [];
    const a = sink.write(10).then(() => order.push(10));
    const b = sink.write(11).then(() => order.push(11));
    await settle();
    for (let round = 0; round < 5; round++) {
      for (const g of gates.splice(0)) g.resolve();
      await settle();
    }
    await Promise.all([a, b]);
    expect(order).toEqual([10, 11]);
  });

  it('bounds bytes as well as records', async () => {
    const { sink } = gatedSink({
      maxRecords: 100,
      maxPendingRecords: 100,
      maxBytes: 100,
      maxPendingBytes: 250,
      // Estimated bytes only: the per-record overhead has a test of its own below.
      recordOverheadBytes: 0,
      estimateBytes: () => 100,
    });
    expect([sink.tryWrite(1), sink.tryWrite(2), sink.tryWrite(3)]).toEqual([true, true, false]);
  });

  it('counts each pending record as its estimated bytes plus recordOverheadBytes against maxPendingBytes', async () => {
    const { sink, gates } = gatedSink({
      maxRecords: 100,
      maxPendingRecords: 100,
      maxBytes: 100,
      maxPendingBytes: 1000,
      recordOverheadBytes: 150,
      estimateBytes: () => 100,
    });
    // 250 a record: four fit in 1,000, a fifth would need 1,250.
    const taken = Array.from({ length: 6 }, (_, i) => sink.tryWrite(i));
    expect(taken).toEqual([true, true, true, true, false, false]);
    // The gauge stays the estimated bytes; the overhead only counts against the bound.
    expect(sink.counters()).toMatchObject({ pendingRecords: 4, pendingBytes: 400 });
    const drain = async () => {
      const flushed = sink.flush();
      for (let round = 0; round < 20 && sink.counters().pendingRecords > 0; round++) {
        for (const g of gates.splice(0)) g.resolve();
        await settle();
      }
      await flushed;
    };
    await drain();
    expect(sink.counters()).toMatchObject({ pendingRecords: 0, pendingBytes: 0, written: 4 });
    // Settled records freed their overhead with their bytes: four fit again.
    expect(Array.from({ length: 5 }, (_, i) => sink.tryWrite(10 + i))).toEqual([
      true,
      true,
      true,
      true,
      false,
    ]);
    await drain();
    expect(sink.counters().written).toBe(8);
  });

  it('lets one record through whatever its overhead when nothing is pending', () => {
    const { sink } = gatedSink({
      maxBytes: 100,
      maxPendingBytes: 100,
      recordOverheadBytes: 10_000,
      estimateBytes: () => 100,
    });
    expect([sink.tryWrite(1), sink.tryWrite(2)]).toEqual([true, false]);
  });
});
