import { describe, expect, it } from 'vitest';
import { type Batch, type Prepared, Sink } from '../src/index.js';
import { ManualClock, settle } from '../src/testing.js';
import { FakeAdapter, gatedSink } from './fakes.js';

/** A fake adapter whose prepare() doubles numbers and refuses negative ones. */
class PreparingAdapter extends FakeAdapter<number> {
  readonly preparedSeen: Array<readonly unknown[] | undefined> = [];
  prepared = 0;
  prepare(record: number): Prepared {
    this.prepared++;
    if (record < 0) throw new Error('cannot prepare a negative number');
    return { value: record * 2, bytes: 10 + record };
  }
  override async write(batch: Batch<number>) {
    this.preparedSeen.push(batch.prepared);
    return super.write(batch);
  }
}

describe("an adapter's prepare()", () => {
  it('runs once per accepted record and its values reach write() beside the records', async () => {
    const adapter = new PreparingAdapter();
    const sink = new Sink(adapter, { maxRecords: 3, maxAgeMs: 1000, idleMs: 0, clock: new ManualClock() });
    for (const r of [1, 2, 3]) await sink.write(r);
    await sink.flush();
    expect(adapter.prepared).toBe(3);
    expect(adapter.calls[0]!.records).toEqual([1, 2, 3]);
    expect(adapter.preparedSeen[0]).toEqual([2, 4, 6]);
  });

  it("sizes records by prepare()'s bytes, unless the sink's own estimateBytes is given", async () => {
    const own = new Sink(new PreparingAdapter(), { maxAgeMs: 1000, clock: new ManualClock() });
    await own.write(5);
    expect(own.counters().bufferedBytes).toBe(15);
    const user = new Sink(new PreparingAdapter(), {
      maxAgeMs: 1000,
      clock: new ManualClock(),
      estimateBytes: () => 100,
    });
    await user.write(5);
    expect(user.counters().bufferedBytes).toBe(100);
  });

  it('accepts a record prepare() throws on, with undefined in its place for write() to handle', async () => {
    const adapter = new PreparingAdapter();
    const sink = new Sink(adapter, { maxRecords: 2, maxAgeMs: 1000, idleMs: 0, clock: new ManualClock() });
    await sink.write(-1);
    await sink.write(4);
    await sink.flush();
    expect(adapter.calls[0]!.records).toEqual([-1, 4]);
    expect(adapter.preparedSeen[0]).toEqual([undefined, 8]);
  });

  it('leaves batch.prepared out for an adapter without prepare()', async () => {
    const adapter = new FakeAdapter<number>();
    let seen: unknown = 'unset';
    adapter.behave = (batch) => {
      seen = batch.prepared;
    };
    const sink = new Sink(adapter, { maxRecords: 1, clock: new ManualClock() });
    await sink.write(1);
    await sink.flush();
    expect(seen).toBeUndefined();
  });
});

describe('when a batch completes with writers waiting', () => {
  it('starts the next batch before it lets the writers refill the buffer', async () => {
    const { adapter, sink, gates } = gatedSink({ maxAgeMs: 1000 });
    const order: string[] = [];
    const gate = adapter.behave;
    adapter.behave = (batch, call) => {
      order.push(`write ${batch.records.join(',')}`);
      return gate(batch, call);
    };
    for (let i = 0; i < 4; i++) await sink.write(i); // [0,1] in flight, [2,3] buffered
    const fifth = sink.write(4).then(() => order.push('writer admitted'));
    await settle();
    expect(order).toEqual(['write 0,1']);
    gates[0]!.resolve();
    await fifth;
    expect(order).toEqual(['write 0,1', 'write 2,3', 'writer admitted']);
    adapter.behave = () => {}; // later batches land at once
    gates[1]!.resolve();
    await sink.flush();
    expect(adapter.stored).toEqual([0, 1, 2, 3, 4]);
  });
});

describe('accept stamps with the system clock', () => {
  it('share a reading only within one turn of the event loop: a later turn reads the clock again', async () => {
    const adapter = new FakeAdapter<number>();
    const sink = new Sink(adapter, { maxRecords: 100, maxAgeMs: 60_000, idleMs: 0 });
    const latencies: number[] = [];
    sink.on('settled', (e) => latencies.push(...e.latenciesMs));
    sink.tryWrite(1);
    sink.tryWrite(2); // same turn: may carry the first record's stamp
    await new Promise((resolve) => setTimeout(resolve, 25));
    sink.tryWrite(3); // a later turn: a fresh stamp, at least 25 ms later
    const before = performance.now();
    await sink.flush();
    const flushedWithin = performance.now() - before;
    expect(latencies).toHaveLength(3);
    // Stamps are never late: each latency is at least the time since that record's write (less 1 ms
    // for timers that fire early).
    expect(latencies[0]!).toBeGreaterThanOrEqual(24);
    expect(latencies[1]!).toBeGreaterThanOrEqual(24);
    // The third record's stamp is fresh: 25 ms younger than the first two, up to the flush time.
    expect(latencies[0]! - latencies[2]!).toBeGreaterThanOrEqual(24);
    expect(latencies[2]!).toBeLessThanOrEqual(flushedWithin + 5);
    await sink.close();
  });
});

describe("the 'settled' event's latencies", () => {
  it('are those at the settlement, whenever a listener reads them, and one array however often read', async () => {
    const clock = new ManualClock();
    const sink = new Sink(new FakeAdapter<number>(), { maxRecords: 10, maxAgeMs: 1000, idleMs: 0, clock });
    const events: Array<{ readonly latenciesMs: readonly number[] }> = [];
    sink.on('settled', (e) => events.push(e));
    sink.tryWrite(1);
    await clock.advance(30);
    sink.tryWrite(2);
    await clock.advance(20);
    await sink.flush();
    await clock.advance(500); // read long after the settlement: the figures must not grow
    expect(events).toHaveLength(1);
    const first = events[0]!.latenciesMs;
    expect(first).toEqual([50, 20]);
    expect(events[0]!.latenciesMs).toBe(first);
  });
});
