import { Writable } from 'node:stream';
import type { Sink } from './sink.js';
import type { RecordMeta } from './types.js';

export interface WritableOptions<T> {
  /**
   * Records the stream itself buffers before `write()` returns false. The sink's own pending bound
   * comes on top: a chunk is taken from the stream's buffer only when the sink has room.
   * @default 16
   */
  highWaterMark?: number;
  /** Metadata of a chunk (source partition, offset, event time). */
  meta?: (chunk: T) => RecordMeta | undefined;
  /**
   * What finishing the stream does to the sink: `flush` waits until every record is terminal and
   * leaves the sink open; `close` closes it.
   * @default 'flush'
   */
  onFinish?: 'flush' | 'close';
}

/**
 * An objectMode Writable that feeds a sink. `write()` returns false at `highWaterMark` and 'drain'
 * follows, so `stream.pipeline()` slows the producer when the store is slow. 'finish' is emitted
 * only once every record written is durable or dead-lettered. When the shutdown coordinator
 * closes the sink, the chunk being written joins the final flush and later chunks park (their
 * callback never runs), so `stream.pipeline()` stops where it is while the flush completes and the
 * process exits with the shutdown's code; after your own `close()` a chunk fails the stream.
 */
export function toWritable<T>(sink: Sink<T>, options: WritableOptions<T> = {}): Writable {
  const meta = options.meta;
  const onFinish = options.onFinish ?? 'flush';
  return new Writable({
    objectMode: true,
    highWaterMark: options.highWaterMark ?? 16,
    write(chunk: T, _encoding, callback) {
      sink.write(chunk, meta?.(chunk)).then(() => callback(), callback);
    },
    writev(chunks, callback) {
      (async () => {
        for (const { chunk } of chunks) {
          const record = chunk as T;
          if (!sink.tryWrite(record, meta?.(record))) await sink.write(record, meta?.(record));
        }
      })().then(() => callback(), callback);
    },
    final(callback) {
      (onFinish === 'close' ? sink.close() : sink.flush()).then(() => callback(), callback);
    },
  });
}

/**
 * Writes every item of an (async) iterable into a sink, with backpressure, then waits until all
 * of them are terminal. Resolves with the number of records written. Once the shutdown
 * coordinator has closed the sink it never settles: the loop stops at the next record (which is
 * not accepted) while the coordinator flushes and exits.
 */
export async function pipeInto<T>(
  source: Iterable<T> | AsyncIterable<T>,
  sink: Sink<T>,
  options: { meta?: (item: T) => RecordMeta | undefined; signal?: AbortSignal } = {},
): Promise<number> {
  let n = 0;
  const writeOptions = options.signal ? { signal: options.signal } : undefined;
  for await (const item of source) {
    const m = options.meta?.(item);
    if (!sink.tryWrite(item, m)) await sink.write(item, m, writeOptions);
    n++;
  }
  await sink.flush();
  return n;
}
