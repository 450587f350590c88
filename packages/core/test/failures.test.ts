import { describe, expect, it } from 'vitest';
import { Sink, type SpillwayError } from '../src/index.js';
import { ManualClock, settle } from '../src/testing.js';
import { BadRecord, FakeAdapter, MemoryDeadLetter, Misconfigured, Transient } from './fakes.js';

function setup(options: Record<string, unknown> = {}) {
  const clock = new ManualClock();
  const adapter = new FakeAdapter<number>();
  adapter.now = () => clock.now();
  const deadLetter = new MemoryDeadLetter<number>();
  const sink = new Sink(adapter, { maxRecords: 10, maxAgeMs: 100, idleMs: 0, clock, deadLetter, ...options });
  return { clock, adapter, sink, deadLetter };
}

describe('failures', () => {
  it('retries a transient failure with backoff and then lands the batch', async () => {
    const { clock, adapter, sink } = setup({ retry: { baseDelayMs: 100, maxDelayMs: 1000 } });
    adapter.behave = (_b, call) => {
      if (call <= 2) throw new Transient('connection reset');
    };
    const retries: number[] = [];
    sink.on('retry', (e) => retries.push(e.delayMs));
    for (let i = 0; i < 10; i++) await sink.write(i);
    await clock.advance(10_000);
    expect(adapter.calls.map((c) => c.attempt)).toEqual([1, 2, 3]);
    expect(adapter.stored).toEqual([0, 1, 2, 3, 4, 5, 6, 7, 8, 9]);
    expect(sink.snapshot()).toMatchObject({ retries: 2, written: 10, deadLettered: 0 });
    // Full jitter: the n-th retry waits at most min(cap, base·2^n).
    expect(retries[0]).toBeLessThanOrEqual(100);
    expect(retries[1]).toBeLessThanOrEqual(200);
  });

  it('keeps a retry storm within its elapsed bound, then dead-letters as retries-exhausted', async () => {
    const { clock, adapter, sink, deadLetter } = setup({
      retry: { maxAttempts: Number.POSITIVE_INFINITY, baseDelayMs: 50, maxDelayMs: 400, maxElapsedMs: 3000 },
    });
    adapter.behave = () => {
      throw new Transient('store unavailable');
    };
    for (let i = 0; i < 10; i++) await sink.write(i);
    await clock.advance(20_000);
    const first = adapter.calls[0]!.startedAt;
    const last = adapter.calls.at(-1)!.startedAt;
    expect(last - first).toBeLessThanOrEqual(3000);
    expect(adapter.calls.length).toBeGreaterThan(3);
    expect(deadLetter.letters).toHaveLength(10);
    expect(deadLetter.letters[0]!.reason).toBe('retries-exhausted');
    expect((deadLetter.letters[0]!.error as SpillwayError).code).toBe('SPILLWAY_RETRIES_EXHAUSTED');
    expect(sink.snapshot()).toMatchObject({ written: 0, deadLettered: 10, pendingRecords: 0 });
  });

  it('gives up after maxAttempts', async () => {
    const { clock, adapter, sink, deadLetter } = setup({ retry: { maxAttempts: 3, baseDelayMs: 1 } });
    adapter.behave = () => {
      throw new Transient('timeout');
    };
    await sink.write(1);
    await clock.advance(1000);
    expect(adapter.calls).toHaveLength(3);
    expect(deadLetter.letters.map((l) => l.record)).toEqual([1]);
  });

  it('bisects a batch to isolate exactly the bad records, in about k·log2(n) writes', async () => {
    const n = 1024;
    const bad = new Set([3, 400, 401, 1000, 1023]);
    const { clock, adapter, sink, deadLetter } = setup({ maxRecords: n, maxAgeMs: 10 });
    adapter.behave = (batch) => {
      if (batch.records.some((r) => bad.has(r))) throw new BadRecord('check constraint violated');
    };
    for (let i = 0; i < n; i++) await sink.write(i);
    await clock.advance(100);
    expect(deadLetter.letters.map((l) => l.record).sort((a, b) => a - b)).toEqual(
      [...bad].sort((a, b) => a - b),
    );
    expect(deadLetter.letters.every((l) => l.reason === 'rejected')).toBe(true);
    expect(adapter.stored).toHaveLength(n - bad.size);
    expect(new Set(adapter.stored).size).toBe(n - bad.size);
    // Each bad record costs at most two writes per level of the bisection tree.
    const bound = 1 + 2 * bad.size * Math.log2(n);
    expect(adapter.calls.length).toBeLessThanOrEqual(bound);
    expect(adapter.calls.length).toBeLessThan(n / 4);
  });

  it('dead-letters the records a partial write refused and keeps the ones that landed', async () => {
    const { clock, adapter, sink, deadLetter } = setup({ maxRecords: 5 });
    adapter.behave = (batch) =>
      batch.attempt === 1
        ? {
            rejected: [
              { index: 1, error: new BadRecord('WRONGTYPE') },
              { index: 3, error: new Transient('busy') },
            ],
          }
        : undefined;
    for (let i = 0; i < 5; i++) await sink.write(i * 10);
    await clock.advance(5000);
    expect(deadLetter.letters.map((l) => l.record)).toEqual([10]);
    // The transient one was retried alone and landed.
    expect(adapter.calls.at(-1)!.records).toEqual([30]);
    expect(adapter.stored.sort((a, b) => a - b)).toEqual([0, 20, 30, 40]);
  });

  it('stops on a fatal error: writes reject, nothing more is reported durable', async () => {
    const { clock, adapter, sink } = setup({ maxRecords: 2 });
    adapter.behave = () => {
      throw new Misconfigured('relation "dock_status" does not exist');
    };
    const errors: unknown[] = [];
    sink.on('error', (e) => errors.push(e.error));
    await sink.write(1);
    await sink.write(2);
    await clock.advance(10);
    expect(sink.state).toBe('failed');
    expect(errors).toHaveLength(1);
    await expect(sink.write(3)).rejects.toMatchObject({ code: 'SPILLWAY_SINK_FAILED' });
    expect(() => sink.tryWrite(3)).toThrow(/dock_status/);
    expect(sink.snapshot()).toMatchObject({ written: 0, deadLettered: 0, pendingRecords: 2 });
    await expect(sink.flush()).rejects.toMatchObject({ code: 'SPILLWAY_SINK_FAILED' });
    await expect(sink.close({ timeoutMs: 100 })).rejects.toMatchObject({ code: 'SPILLWAY_SINK_FAILED' });
  });

  it('treats a refused record as fatal when there is no dead-letter target', async () => {
    const clock = new ManualClock();
    const adapter = new FakeAdapter<number>();
    adapter.behave = () => {
      throw new BadRecord('value too long');
    };
    const sink = new Sink(adapter, { maxRecords: 1, clock });
    await sink.write(1);
    await clock.advance(10);
    expect(sink.state).toBe('failed');
    await expect(sink.write(2)).rejects.toMatchObject({ code: 'SPILLWAY_SINK_FAILED' });
    expect(sink.snapshot().deadLettered).toBe(0);
  });

  it('fails the sink when the dead-letter target itself fails, leaving the records pending', async () => {
    const clock = new ManualClock();
    const adapter = new FakeAdapter<number>();
    adapter.behave = () => {
      throw new BadRecord('bad');
    };
    const sink = new Sink(adapter, {
      maxRecords: 1,
      clock,
      deadLetter: {
        write: async () => {
          throw new Error('disk full');
        },
      },
    });
    await sink.write(1);
    await clock.advance(10);
    await settle();
    expect(sink.state).toBe('failed');
    expect(sink.pending()).toMatchObject({ inFlight: 1 });
  });

  it('writeDurable() resolves with the record outcome', async () => {
    const { clock, adapter, sink } = setup({ maxRecords: 100, maxAgeMs: 50 });
    adapter.behave = (batch) => {
      if (batch.records.includes(7)) throw new BadRecord('bad');
    };
    const good = sink.writeDurable(1);
    const bad = sink.writeDurable(7);
    await clock.advance(100);
    await expect(good).resolves.toBe('durable');
    await expect(bad).resolves.toBe('dead-lettered');
  });
});

describe('partial writes with a fatal refusal', () => {
  it('reports the records that landed as durable before stopping the sink', async () => {
    const { clock, adapter, sink } = setup({ maxRecords: 4 });
    adapter.behave = () => ({
      rejected: [{ index: 2, error: new Misconfigured('partition 9 does not exist') }],
    });
    for (let i = 0; i < 4; i++) await sink.write(i);
    await clock.advance(10);
    expect(sink.state).toBe('failed');
    expect(sink.snapshot()).toMatchObject({ written: 3, deadLettered: 0, pendingRecords: 1 });
  });
});
