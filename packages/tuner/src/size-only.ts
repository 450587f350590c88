import type { Batch, Distribution, FlushReason, RecordMeta, SinkAdapter } from '@spillway/core';
import { Histogram } from '@spillway/core/kit';
import type { DockStatus } from './records.js';
import type { Subject } from './subject.js';

interface Buffer {
  records: DockStatus[];
  metas: RecordMeta[];
  acceptedAt: number[];
  bytes: number;
}

/**
 * The batcher people write first: one array per partition (to keep each partition in order),
 * written when it holds `maxRecords`, with the producer waiting while a write runs. No timer:
 * a partition that stops short of a full batch keeps its records until shutdown.
 */
export class SizeOnlyBatcher implements Subject {
  private readonly buffers = new Map<string, Buffer>();
  private writing: Promise<void> | undefined;
  private nextId = 1;
  private readonly flushListeners: Array<(reason: FlushReason, records: number, bytes: number) => void> = [];
  private readonly writtenListeners: Array<(records: number, durationMs: number) => void> = [];
  private readonly settledListeners: Array<
    (metas: readonly (RecordMeta | undefined)[], latencies: readonly number[], durable: boolean) => void
  > = [];
  private readonly durations = new Histogram(1000);

  constructor(
    private readonly adapter: SinkAdapter<DockStatus>,
    private readonly maxRecords: number,
    private readonly estimate: (record: DockStatus) => number,
  ) {}

  tryWrite(record: DockStatus, meta: RecordMeta): boolean {
    if (this.writing) return false;
    const key = String(meta.partition ?? '');
    let buf = this.buffers.get(key);
    if (!buf) {
      buf = { records: [], metas: [], acceptedAt: [], bytes: 0 };
      this.buffers.set(key, buf);
    }
    buf.records.push(record);
    buf.metas.push(meta);
    buf.acceptedAt.push(performance.now());
    buf.bytes += this.estimate(record);
    if (buf.records.length >= this.maxRecords) {
      this.writing = this.writeOut(key, buf, 'size').finally(() => {
        this.writing = undefined;
      });
    }
    return true;
  }

  async write(record: DockStatus, meta: RecordMeta): Promise<void> {
    while (this.writing) await this.writing;
    this.tryWrite(record, meta);
  }

  private async writeOut(key: string, buf: Buffer, reason: FlushReason): Promise<void> {
    this.buffers.delete(key);
    const batch: Batch<DockStatus> = {
      id: this.nextId++,
      reason,
      attempt: 1,
      records: buf.records,
      metas: buf.metas,
      bytes: buf.bytes,
    };
    for (const l of this.flushListeners) l(reason, buf.records.length, buf.bytes);
    const started = performance.now();
    // What a first version does: no retry, no partial-write handling; an error ends the run.
    const outcome = await this.adapter.write(batch);
    if (outcome && outcome.rejected.length > 0) {
      const first = outcome.rejected[0]?.error as { message?: string } | undefined;
      throw new TypeError(
        `size-only baseline: the store refused ${outcome.rejected.length} record(s): ${first?.message ?? String(first)}`,
      );
    }
    const now = performance.now();
    this.durations.record(now - started);
    for (const l of this.writtenListeners) l(buf.records.length, now - started);
    const latencies = buf.acceptedAt.map((t) => now - t);
    for (const l of this.settledListeners) l(buf.metas, latencies, true);
  }

  onFlush(listener: (reason: FlushReason, records: number, bytes: number) => void): void {
    this.flushListeners.push(listener);
  }

  onWritten(listener: (records: number, durationMs: number) => void): void {
    this.writtenListeners.push(listener);
  }

  onSettled(
    listener: (
      metas: readonly (RecordMeta | undefined)[],
      latencies: readonly number[],
      durable: boolean,
    ) => void,
  ): void {
    this.settledListeners.push(listener);
  }

  async close(): Promise<void> {
    while (this.writing) await this.writing;
    for (const [key, buf] of [...this.buffers]) await this.writeOut(key, buf, 'shutdown');
    await this.adapter.close?.();
  }

  flushDurationMs(): Distribution {
    return this.durations.summary();
  }
}
