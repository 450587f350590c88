import type { Batch, ErrorClass, PartialWrite, SinkAdapter } from '@spillway/core';

/** An in-memory adapter for unit tests of the ingest logic (the integration tests use PostgreSQL). */
export class MemoryAdapter<T> implements SinkAdapter<T> {
  readonly kind = 'memory';
  readonly stored: T[] = [];
  readonly lines: number[] = [];
  batches = 0;
  /** Records the store refuses, as a PartialWrite would report them. */
  refuse: (record: T) => boolean = () => false;
  /** Keep nothing (memory measurements on large inputs). */
  discard = false;
  delayMs = 0;

  async write(batch: Batch<T>): Promise<PartialWrite | undefined> {
    this.batches++;
    if (this.delayMs > 0) await new Promise((r) => setTimeout(r, this.delayMs));
    const rejected: Array<{ index: number; error: unknown }> = [];
    batch.records.forEach((r, i) => {
      if (this.refuse(r)) rejected.push({ index: i, error: new RangeError('refused by the test store') });
      else if (!this.discard) {
        this.stored.push(r);
        this.lines.push(Number(batch.metas[i]?.offset));
      }
    });
    return rejected.length > 0 ? { rejected } : undefined;
  }

  classify(error: unknown): ErrorClass {
    return error instanceof RangeError ? 'split' : 'fatal';
  }
}
