import { describe, expect, it } from 'vitest';
import { ProgressTracker, Sink } from '../src/index.js';
import { ManualClock } from '../src/testing.js';
import { FakeAdapter } from './fakes.js';

describe('ProgressTracker', () => {
  it('commits the next offset to read: last contiguous terminal offset + 1', () => {
    // Source: Apache Kafka documentation, consumer offset management — the committed offset is
    // the offset of the next message the consumer will read.
    const p = new ProgressTracker();
    for (const o of [5, 6, 7]) p.track('t:0', o);
    expect(p.committable('t:0')).toBeUndefined();
    p.complete('t:0', 5);
    expect(p.committable('t:0')).toBe(6n);
  });

  it('never passes an unfinished offset when batches finish out of order', () => {
    const p = new ProgressTracker();
    for (let o = 0; o < 10; o++) p.track('t:0', o);
    for (const o of [9, 8, 3, 2, 1]) p.complete('t:0', o);
    expect(p.committable('t:0')).toBeUndefined(); // 0 is still open
    p.complete('t:0', 0);
    expect(p.committable('t:0')).toBe(4n); // 4 is open
    for (const o of [4, 5, 6, 7]) p.complete('t:0', o);
    expect(p.committable('t:0')).toBe(10n);
    expect(p.pending('t:0')).toBe(0);
  });

  it('waits for every record of an offset that fed several records', () => {
    const p = new ProgressTracker();
    p.track('t:1', '100', 2); // one message routed to two sinks
    p.track('t:1', '101');
    p.complete('t:1', '100');
    p.complete('t:1', '101');
    expect(p.committable('t:1')).toBeUndefined();
    p.complete('t:1', '100');
    expect(p.committable('t:1')).toBe(102n);
  });

  it('passes an offset with nothing to wait for once every earlier one is done', () => {
    const p = new ProgressTracker();
    p.track('t:0', 1);
    p.track('t:0', 2, 0);
    expect(p.committable('t:0')).toBeUndefined();
    p.complete('t:0', 1);
    expect(p.committable('t:0')).toBe(3n);
  });

  it('handles gaps in offsets (compacted topics, transaction markers)', () => {
    const p = new ProgressTracker();
    for (const o of [10, 13, 20]) p.track('t:0', o);
    for (const o of [10, 13, 20]) p.complete('t:0', o);
    expect(p.committable('t:0')).toBe(21n);
  });

  it('ignores a redelivered offset at or below the last one tracked', () => {
    const p = new ProgressTracker();
    expect(p.track('t:0', 5)).toBe(true);
    expect(p.track('t:0', 4)).toBe(false);
    p.complete('t:0', 5);
    expect(p.committable('t:0')).toBe(6n);
  });

  it('keeps partitions apart', () => {
    const p = new ProgressTracker();
    p.track('t:0', 1);
    p.track('t:1', 1);
    p.complete('t:1', 1);
    expect([...p.points()]).toEqual([['t:1', 2n]]);
  });

  it('stays linear on a long stream (amortised O(1) per offset)', () => {
    const p = new ProgressTracker();
    const n = 200_000;
    for (let o = 0; o < n; o++) p.track('t:0', o);
    // Finish in reverse pairs: every second completion advances the point by two.
    for (let o = 0; o < n; o += 2) {
      p.complete('t:0', o + 1);
      p.complete('t:0', o);
    }
    expect(p.committable('t:0')).toBe(BigInt(n));
  });

  it('tracks offsets beyond 2^53 exactly, next to small ones', () => {
    const p = new ProgressTracker();
    const big = 2n ** 63n - 10n; // Kafka offsets are signed 64-bit
    p.track('t:0', big);
    p.track('t:0', big + 1n);
    p.track('t:1', 5);
    p.complete('t:0', big + 1n);
    expect(p.committable('t:0')).toBeUndefined();
    p.complete('t:0', big);
    expect(p.committable('t:0')).toBe(big + 2n);
    p.complete('t:1', 5n);
    expect(p.committable('t:1')).toBe(6n);
    // Two offsets that round to the same double stay apart.
    const q = new ProgressTracker();
    q.track('k', 2n ** 60n);
    q.track('k', 2n ** 60n + 1n);
    q.complete('k', 2n ** 60n + 1n);
    expect(q.committable('k')).toBeUndefined();
    expect(q.pending('k')).toBe(2);
  });
});

describe('a meta with externalProgress', () => {
  it("is left to its source: the sink's own tracker neither tracks nor completes it", async () => {
    const sink = new Sink(new FakeAdapter<number>(), { maxRecords: 10, clock: new ManualClock() });
    await sink.write(1, { topic: 'rides', partition: 0, offset: '5' });
    await sink.write(2, { topic: 'rides', partition: 1, offset: '7', externalProgress: true });
    await sink.flush();
    expect(sink.progress.committable('rides:0')).toBe(6n);
    expect(sink.progress.lastTracked('rides:1')).toBeUndefined();
    expect([...sink.progress.keys()]).toEqual(['rides:0']);
  });
});

describe('event time → durable', () => {
  it('counts every record, runs of one event time and single ones alike', async () => {
    const clock = new ManualClock(0, 1_700_000_000_000);
    const sink = new Sink(new FakeAdapter<number>(), { maxRecords: 10, clock });
    const at = (ms: number) => ({ eventTime: 1_700_000_000_000 - ms });
    // 100 ms old, twice in a row, then 50 ms old, then 100 ms again: three runs of one value.
    for (const [r, old] of [
      [1, 100],
      [2, 100],
      [3, 50],
      [4, 100],
    ] as const)
      await sink.write(r, at(old));
    await clock.advance(20);
    await sink.flush();
    const d = sink.snapshot().eventToDurableMs;
    expect(d.count).toBe(4);
    expect(d.min).toBeCloseTo(70, 0);
    expect(d.max).toBeCloseTo(120, 0);
    expect(d.mean).toBeCloseTo((120 * 3 + 70) / 4, 0);
  });
});
