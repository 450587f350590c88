/**
 * The buffer: accepted records waiting for a batch, in accept order. Which of them may leave is
 * the scheduler's decision; the buffer takes them out.
 */
import type { FlushReason, RecordMeta } from '../types.js';
import type { Entry } from './records.js';

/** What `take()` found. */
export type Taken<T> =
  /** A batch that may leave now, and why. */
  | { readonly entries: Entry<T>[]; readonly reason: FlushReason }
  /**
   * Nothing may leave yet: the due records' keys are busy. `waitUntil` is the age deadline of the
   * oldest record that could go (undefined when none could), for the timer.
   */
  | { readonly entries: undefined; readonly waitUntil: number | undefined };

export interface BatchLimits {
  readonly maxRecords: number;
  readonly maxBytes: number;
  readonly maxAgeMs: number;
}

export class RecordBuffer<T> {
  // A FIFO array read from `head`; compacted now and then.
  private entries: Entry<T>[] = [];
  private head = 0;
  /** Estimated bytes of the buffered records. */
  bytes = 0;
  /** Buffered records a flush request asked to leave now, and the latest request's reason. */
  private forcedCount = 0;
  private forcedReason: FlushReason = 'manual';
  /** When the last record was accepted (idle flushes). */
  lastWriteAt: number;

  constructor(now: number) {
    this.lastWriteAt = now;
  }

  get count(): number {
    return this.entries.length - this.head;
  }

  /** The oldest buffered record. */
  oldest(): Entry<T> | undefined {
    return this.entries[this.head];
  }

  push(entry: Entry<T>): void {
    this.entries.push(entry);
    this.bytes += entry.bytes;
    this.lastWriteAt = entry.acceptedAt;
  }

  /** Calls `fn` for every buffered record, oldest first. */
  forEach(fn: (entry: Entry<T>) => void): void {
    for (let i = this.head; i < this.entries.length; i++) fn(this.entries[i]!);
  }

  /** Marks the matching buffered records to leave now, for `reason`. */
  force(match: (meta: RecordMeta | undefined) => boolean, reason: FlushReason): void {
    for (let i = this.head; i < this.entries.length; i++) {
      const e = this.entries[i]!;
      if (e.forced === undefined && match(e.meta)) {
        e.forced = reason;
        this.forcedCount++;
      }
    }
    if (this.forcedCount > 0) this.forcedReason = reason;
  }

  /** The reason a batch is due now, if one is (`writersWaiting`: the pending bound is reached). */
  dueReason(
    now: number,
    limits: BatchLimits,
    idleMs: number,
    writersWaiting: boolean,
  ): FlushReason | undefined {
    const n = this.count;
    if (n === 0) return undefined;
    if (this.forcedCount > 0) return this.forcedReason;
    if (n >= limits.maxRecords) return 'size';
    if (this.bytes >= limits.maxBytes) return 'bytes';
    if (now - this.entries[this.head]!.acceptedAt >= limits.maxAgeMs) return 'age';
    if (idleMs > 0 && now - this.lastWriteAt >= idleMs) return 'idle';
    // Writers are blocked on the pending bound: the buffer is as full as it may get.
    if (writersWaiting) return 'size';
    return undefined;
  }

  /**
   * Takes the next batch, due for `reason`, skipping records whose key is `locked` (a batch of that
   * key is in flight). When keys are skipped, the records that could go must themselves be due
   * (full, old, forced, or idle): otherwise a buffer held up by one busy key would leak out in
   * tiny batches.
   */
  take(reason: FlushReason, now: number, limits: BatchLimits, locked: ReadonlyMap<string, number>): Taken<T> {
    const { maxRecords, maxBytes, maxAgeMs } = limits;
    const out: Entry<T>[] = [];
    let bytes = 0;
    let takenReason = reason;
    if (locked.size === 0) {
      while (this.head < this.entries.length && out.length < maxRecords) {
        const e = this.entries[this.head]!;
        if (out.length > 0 && bytes + e.bytes > maxBytes) break;
        out.push(e);
        bytes += e.bytes;
        this.head++;
      }
    } else {
      const rest: Entry<T>[] = [];
      let full = false;
      for (let i = this.head; i < this.entries.length; i++) {
        const e = this.entries[i]!;
        if (full || (e.key !== undefined && locked.has(e.key))) {
          rest.push(e);
          continue;
        }
        if (out.length > 0 && bytes + e.bytes > maxBytes) {
          full = true;
          rest.push(e);
          continue;
        }
        out.push(e);
        bytes += e.bytes;
        if (out.length >= maxRecords) full = true;
      }
      // The reason this smaller set of records is due, if it is.
      const forced = out.find((e) => e.forced !== undefined)?.forced;
      const due: FlushReason | undefined = forced
        ? forced
        : full
          ? reason === 'bytes'
            ? 'bytes'
            : 'size'
          : out.length > 0 && now - out[0]!.acceptedAt >= maxAgeMs
            ? 'age'
            : reason === 'idle'
              ? 'idle'
              : undefined;
      if (!due)
        return { entries: undefined, waitUntil: out.length > 0 ? out[0]!.acceptedAt + maxAgeMs : undefined };
      takenReason = due;
      this.entries = rest;
      this.head = 0;
    }
    if (this.head > 4096 && this.head * 2 > this.entries.length) {
      this.entries = this.entries.slice(this.head);
      this.head = 0;
    }
    this.bytes -= bytes;
    for (const e of out) if (e.forced !== undefined) this.forcedCount--;
    return { entries: out, reason: takenReason };
  }
}
