import { describe, expect, it } from 'vitest';
import { ShutdownTimeoutError, Sink } from '../src/index.js';
import { ManualClock, settle } from '../src/testing.js';
import { deferred, FakeAdapter, gatedSink, Transient } from './fakes.js';

describe('close()', () => {
  it('flushes what is buffered (shutdown) and resolves when every record is durable', async () => {
    const clock = new ManualClock();
    const adapter = new FakeAdapter<number>();
    let closedAdapter = false;
    adapter.close = async () => {
      closedAdapter = true;
    };
    const sink = new Sink(adapter, { maxRecords: 100, maxAgeMs: 10_000, clock });
    for (let i = 0; i < 5; i++) await sink.write(i);
    await sink.close();
    expect(adapter.stored).toEqual([0, 1, 2, 3, 4]);
    expect(adapter.calls[0]!.reason).toBe('shutdown');
    expect(sink.state).toBe('closed');
    expect(closedAdapter).toBe(true);
    await expect(sink.closed()).resolves.toBeUndefined();
  });

  it('refuses writes once close() began', async () => {
    const sink = new Sink(new FakeAdapter<number>(), { clock: new ManualClock() });
    const closing = sink.close();
    await expect(sink.write(1)).rejects.toMatchObject({ code: 'SPILLWAY_SINK_CLOSED' });
    await closing;
  });

  it('rejects past its deadline and names how many records are pending and in which state', async () => {
    const clock = new ManualClock();
    const adapter = new FakeAdapter<number>();
    const gate = deferred();
    adapter.behave = (batch) => (batch.records[0] === 0 ? gate.promise : undefined);
    const sink = new Sink(adapter, { maxRecords: 3, maxAgeMs: 10_000, clock });
    for (let i = 0; i < 5; i++) await sink.write(i); // 3 in flight (held), 2 buffered
    await settle();
    const closing = sink.close({ timeoutMs: 1000 });
    const outcome = closing.then(
      () => undefined,
      (e: unknown) => e,
    );
    await clock.advance(1000);
    const error = await outcome;
    expect(error).toBeInstanceOf(ShutdownTimeoutError);
    expect((error as ShutdownTimeoutError).code).toBe('SPILLWAY_SHUTDOWN_TIMEOUT');
    // Concurrency 1: the second batch waits for the held one, so all 5 are pending.
    expect((error as ShutdownTimeoutError).pending).toEqual({ buffered: 2, inFlight: 3, retrying: 0 });
    expect((error as Error).message).toMatch(/5 record\(s\) still pending \(2 buffered, 3 in flight/);
    gate.resolve();
  });

  it('counts records waiting out a retry backoff as retrying', async () => {
    const clock = new ManualClock();
    const adapter = new FakeAdapter<number>();
    adapter.behave = () => {
      throw new Transient('connection refused');
    };
    const sink = new Sink(adapter, {
      maxRecords: 2,
      clock,
      retry: { baseDelayMs: 10_000, maxDelayMs: 10_000 },
    });
    await sink.write(1);
    await sink.write(2);
    await settle();
    expect(sink.pending().retrying).toBe(2);
    const closing = sink.close({ timeoutMs: 50 }).catch((e: unknown) => e);
    await clock.advance(50);
    expect(await closing).toMatchObject({ pending: { buffered: 0, inFlight: 2 } });
  });

  it('lets a write waiting for room join the final flush and resolves it', async () => {
    const { adapter, sink, gates } = gatedSink();
    for (let i = 0; i < 4; i++) await sink.write(i); // the pending bound: 4
    const waiting = [sink.write(4), sink.write(5)];
    const settled = Promise.all(waiting).then(() => 'resolved');
    expect(sink.counters().waitingWriters).toBe(2);
    const closing = sink.close();
    // Accepted beyond the bound, by the number of writers that were waiting.
    expect(sink.counters()).toMatchObject({ waitingWriters: 0, pendingRecords: 6, accepted: 6 });
    while (adapter.stored.length < 6) {
      gates.shift()?.resolve();
      await settle();
    }
    await closing;
    expect(await settled).toBe('resolved');
    expect(adapter.stored).toEqual([0, 1, 2, 3, 4, 5]);
  });

  it('with laterWrites: park, a write after close began never settles and is not accepted', async () => {
    const clock = new ManualClock();
    const sink = new Sink(new FakeAdapter<number>(), { clock });
    await sink.write(1);
    const closing = sink.close({ laterWrites: 'park' });
    let outcome = 'pending';
    sink.write(2).then(
      () => (outcome = 'resolved'),
      () => (outcome = 'rejected'),
    );
    expect(sink.tryWrite(3)).toBe(false);
    expect(sink.tryWriteMany([4, 5])).toBe(0);
    await closing;
    await settle();
    expect(outcome).toBe('pending');
    expect(sink.counters()).toMatchObject({ accepted: 1, written: 1 });
  });

  it('a later close with laterWrites: park turns refusals of an explicit close into parking', async () => {
    const sink = new Sink(new FakeAdapter<number>(), { clock: new ManualClock() });
    const first = sink.close();
    expect(() => sink.tryWrite(1)).toThrow(expect.objectContaining({ code: 'SPILLWAY_SINK_CLOSED' }));
    const second = sink.close({ laterWrites: 'park' });
    expect(sink.tryWrite(1)).toBe(false);
    await Promise.all([first, second]);
  });

  it('rejects a timeoutMs that is not a finite number > 0, Infinity included, as an invalid option', async () => {
    const sink = new Sink(new FakeAdapter<number>(), { clock: new ManualClock() });
    for (const timeoutMs of [0, -1, Number.NaN, Number.POSITIVE_INFINITY]) {
      await expect(sink.close({ timeoutMs })).rejects.toMatchObject({
        name: 'TypeError',
        code: 'SPILLWAY_INVALID_OPTION',
        message: expect.stringMatching(/`timeoutMs`/),
      });
    }
    await expect(sink.close({ laterWrites: 'drop' as 'park' })).rejects.toMatchObject({
      code: 'SPILLWAY_INVALID_OPTION',
      message: expect.stringMatching(/`laterWrites`/),
    });
    expect(sink.state).toBe('open');
  });
});
