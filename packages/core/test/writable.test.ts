import { Readable } from 'node:stream';
import { pipeline } from 'node:stream/promises';
import { describe, expect, it } from 'vitest';
import { pipeInto, Sink, toWritable } from '../src/index.js';
import { ManualClock, settle } from '../src/testing.js';
import { deferred, FakeAdapter } from './fakes.js';

describe('Writable adapter', () => {
  it('returns false from write() at its highWaterMark and emits drain once there is room', async () => {
    // Source: Node.js documentation, Stream, writable.write(): "returns false if the stream
    // wishes for the calling code to wait for the 'drain' event"; 'drain' follows when writing
    // can resume. highWaterMark counts objects in objectMode.
    const adapter = new FakeAdapter<number>();
    const gate = deferred();
    adapter.behave = () => gate.promise;
    const sink = new Sink(adapter, {
      maxRecords: 2,
      maxPendingRecords: 2,
      clock: new ManualClock(),
      idleMs: 0,
    });
    const w = toWritable(sink, { highWaterMark: 3 });
    const results: boolean[] = [];
    for (let i = 0; i < 6; i++) results.push(w.write(i));
    // The sink takes 2 (its bound), the stream buffers up to its highWaterMark of 3.
    expect(results.slice(0, 2)).toEqual([true, true]);
    expect(results.at(-1)).toBe(false);
    expect(w.writableNeedDrain).toBe(true);
    const drained = new Promise<void>((resolve) => w.once('drain', resolve));
    gate.resolve();
    await drained;
    await new Promise<void>((resolve, reject) => w.end((e?: Error | null) => (e ? reject(e) : resolve())));
    expect(adapter.stored).toEqual([0, 1, 2, 3, 4, 5]);
  });

  it('works in stream.pipeline() and finishes only when every record is durable', async () => {
    const adapter = new FakeAdapter<{ dock: number }>();
    adapter.behave = () => new Promise<void>((r) => setTimeout(r, 2));
    const sink = new Sink(adapter, { maxRecords: 50, maxPendingRecords: 100 });
    const source = Readable.from(Array.from({ length: 1000 }, (_, i) => ({ dock: i })));
    await pipeline(source, toWritable(sink));
    expect(adapter.stored).toHaveLength(1000);
    expect(sink.snapshot()).toMatchObject({ written: 1000, pendingRecords: 0 });
    await sink.close();
  });

  it('can close the sink when the stream finishes', async () => {
    const sink = new Sink(new FakeAdapter<number>(), {});
    await pipeline(Readable.from([1, 2, 3]), toWritable(sink, { onFinish: 'close' }));
    expect(sink.state).toBe('closed');
  });

  it('surfaces a fatal sink error as a stream error', async () => {
    const adapter = new FakeAdapter<number>();
    adapter.behave = () => {
      throw new Error('permission denied for table dock_status');
    };
    const sink = new Sink(adapter, { maxRecords: 1 });
    await expect(pipeline(Readable.from([1, 2, 3, 4]), toWritable(sink))).rejects.toMatchObject({
      code: 'SPILLWAY_SINK_FAILED',
    });
  });
});

describe('pipeInto()', () => {
  it('drains an async iterable into a sink with backpressure and waits for durability', async () => {
    const adapter = new FakeAdapter<number>();
    adapter.behave = () => new Promise<void>((r) => setTimeout(r, 1));
    const sink = new Sink(adapter, { maxRecords: 10, maxPendingRecords: 20 });
    let maxPending = 0;
    async function* gen() {
      for (let i = 0; i < 300; i++) {
        maxPending = Math.max(maxPending, sink.snapshot().pendingRecords);
        yield i;
      }
    }
    const n = await pipeInto(gen(), sink);
    await settle();
    expect(n).toBe(300);
    expect(adapter.stored).toHaveLength(300);
    expect(maxPending).toBeLessThanOrEqual(20);
  });
});
