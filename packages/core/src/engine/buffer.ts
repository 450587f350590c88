/**
 * The buffer: accepted records waiting for a batch, in accept order. Which of them may leave is
 * the scheduler's decision; the buffer takes them out.
 *
 * Records are held in a ring of parallel columns (record, size, accept time, and — only once a
 * record needs one — meta, prepared value, ordering key, forced reason, barriers) rather than an
 * object per record: a buffered record costs the engine about 24 bytes of heap plus 8 per column
 * in use, and a taken record's slots are cleared at once, so nothing the buffer no longer holds
 * stays reachable from it. The `Entry` objects of the rest of the engine are made when a batch is
 * taken.
 */
import type { FlushReason, RecordMeta } from '../types.js';
import type { Barrier, Entry } from './records.js';

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

/** The ring's smallest capacity; it doubles when full and halves when a quarter full (see take()). */
const MIN_CAPACITY = 64;

export class RecordBuffer<T> {
  private capacity = MIN_CAPACITY;
  private mask = MIN_CAPACITY - 1;
  /** Ring position of the oldest record. */
  private head = 0;
  private n = 0;
  private records: (T | undefined)[] = new Array(MIN_CAPACITY);
  // Plain arrays of doubles (unboxed, 8 bytes a slot), kept in the heap so that heap figures see them.
  private sizes: number[] = new Array<number>(MIN_CAPACITY).fill(0);
  private times: number[] = new Array<number>(MIN_CAPACITY).fill(0);
  // Columns most records leave empty: allocated when the first record needs one.
  private metas: (RecordMeta | undefined)[] | undefined;
  private prepared: unknown[] | undefined;
  private keys: (string | undefined)[] | undefined;
  private forced: (FlushReason | undefined)[] | undefined;
  private barriers: (Barrier[] | undefined)[] | undefined;
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
    return this.n;
  }

  /** When the oldest buffered record was accepted; undefined when the buffer is empty. */
  oldestAt(): number | undefined {
    return this.n === 0 ? undefined : this.times[this.head]!;
  }

  push(
    record: T,
    meta: RecordMeta | undefined,
    bytes: number,
    prepared: unknown,
    acceptedAt: number,
    key: string | undefined,
    barrier: Barrier | undefined,
  ): void {
    if (this.n === this.capacity) this.resize(this.capacity * 2);
    const i = (this.head + this.n) & this.mask;
    this.records[i] = record;
    this.sizes[i] = bytes;
    this.times[i] = acceptedAt;
    if (meta !== undefined) (this.metas ??= new Array(this.capacity))[i] = meta;
    if (prepared !== undefined) (this.prepared ??= new Array(this.capacity))[i] = prepared;
    if (key !== undefined) (this.keys ??= new Array(this.capacity))[i] = key;
    if (barrier !== undefined) (this.barriers ??= new Array(this.capacity))[i] = [barrier];
    this.n++;
    this.bytes += bytes;
    this.lastWriteAt = acceptedAt;
  }

  /**
   * Calls `fn` for every buffered record, oldest first, with an `Entry` made for the call; what
   * `fn` sets in its `barriers` is kept.
   */
  forEach(fn: (entry: Entry<T>) => void): void {
    for (let k = 0; k < this.n; k++) {
      const i = (this.head + k) & this.mask;
      const e = this.entryAt(i);
      fn(e);
      if (e.barriers !== (this.barriers?.[i] ?? undefined))
        (this.barriers ??= new Array(this.capacity))[i] = e.barriers;
    }
  }

  /** Marks the matching buffered records to leave now, for `reason`. */
  force(match: (meta: RecordMeta | undefined) => boolean, reason: FlushReason): void {
    for (let k = 0; k < this.n; k++) {
      const i = (this.head + k) & this.mask;
      if (this.forced?.[i] === undefined && match(this.metas?.[i])) {
        (this.forced ??= new Array(this.capacity))[i] = reason;
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
    const n = this.n;
    if (n === 0) return undefined;
    if (this.forcedCount > 0) return this.forcedReason;
    if (n >= limits.maxRecords) return 'size';
    if (this.bytes >= limits.maxBytes) return 'bytes';
    if (now - this.times[this.head]! >= limits.maxAgeMs) return 'age';
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
    if (locked.size === 0 || this.keys === undefined) {
      while (this.n > 0 && out.length < maxRecords) {
        const i = this.head;
        const size = this.sizes[i]!;
        if (out.length > 0 && bytes + size > maxBytes) break;
        out.push(this.entryAt(i));
        this.clear(i);
        bytes += size;
        this.head = (i + 1) & this.mask;
        this.n--;
      }
    } else {
      // First find what may go (nothing moves unless it is due), then take it out and close up
      // the rest in place, in order.
      const keys = this.keys;
      const chosen: number[] = [];
      let full = false;
      let firstAt = 0;
      let forced: FlushReason | undefined;
      for (let k = 0; k < this.n; k++) {
        const i = (this.head + k) & this.mask;
        if (full) break;
        const key = keys[i];
        if (key !== undefined && locked.has(key)) continue;
        const size = this.sizes[i]!;
        if (chosen.length > 0 && bytes + size > maxBytes) {
          full = true;
          break;
        }
        if (chosen.length === 0) firstAt = this.times[i]!;
        forced ??= this.forced?.[i];
        chosen.push(k);
        bytes += size;
        if (chosen.length >= maxRecords) full = true;
      }
      // The reason this smaller set of records is due, if it is.
      const due: FlushReason | undefined = forced
        ? forced
        : full
          ? reason === 'bytes'
            ? 'bytes'
            : 'size'
          : chosen.length > 0 && now - firstAt >= maxAgeMs
            ? 'age'
            : reason === 'idle'
              ? 'idle'
              : undefined;
      if (!due) return { entries: undefined, waitUntil: chosen.length > 0 ? firstAt + maxAgeMs : undefined };
      takenReason = due;
      let w = 0;
      let c = 0;
      for (let k = 0; k < this.n; k++) {
        const i = (this.head + k) & this.mask;
        if (c < chosen.length && chosen[c] === k) {
          out.push(this.entryAt(i));
          c++;
        } else {
          if (w !== k) this.move(i, (this.head + w) & this.mask);
          w++;
        }
      }
      for (let k = w; k < this.n; k++) this.clear((this.head + k) & this.mask);
      this.n = w;
    }
    // Shrinks only well above a batch's worth of slots, so a buffer that fills to a batch and
    // empties again keeps its columns.
    if (this.capacity > 4 * maxRecords && this.capacity > MIN_CAPACITY && this.n <= this.capacity >> 2)
      this.resize(this.capacity >> 1);
    this.bytes -= bytes;
    for (const e of out) if (e.forced !== undefined) this.forcedCount--;
    return { entries: out, reason: takenReason };
  }

  private entryAt(i: number): Entry<T> {
    return {
      record: this.records[i] as T,
      meta: this.metas?.[i],
      bytes: this.sizes[i]!,
      prepared: this.prepared?.[i],
      acceptedAt: this.times[i]!,
      key: this.keys?.[i],
      forced: this.forced?.[i],
      barriers: this.barriers?.[i],
      done: false,
    };
  }

  /** Empties slot `i`, so that what it held is no longer reachable from the buffer. */
  private clear(i: number): void {
    this.records[i] = undefined;
    if (this.metas !== undefined) this.metas[i] = undefined;
    if (this.prepared !== undefined) this.prepared[i] = undefined;
    if (this.keys !== undefined) this.keys[i] = undefined;
    if (this.forced !== undefined) this.forced[i] = undefined;
    if (this.barriers !== undefined) this.barriers[i] = undefined;
  }

  private move(from: number, to: number): void {
    this.records[to] = this.records[from];
    this.sizes[to] = this.sizes[from]!;
    this.times[to] = this.times[from]!;
    if (this.metas !== undefined) this.metas[to] = this.metas[from];
    if (this.prepared !== undefined) this.prepared[to] = this.prepared[from];
    if (this.keys !== undefined) this.keys[to] = this.keys[from];
    if (this.forced !== undefined) this.forced[to] = this.forced[from];
    if (this.barriers !== undefined) this.barriers[to] = this.barriers[from];
  }

  /** Copies the ring into columns of `capacity` slots, oldest record first. */
  private resize(capacity: number): void {
    const { head, n, mask } = this;
    const column = <V>(old: V[] | undefined): V[] | undefined => {
      if (old === undefined) return undefined;
      const next = new Array<V>(capacity);
      for (let k = 0; k < n; k++) next[k] = old[(head + k) & mask]!;
      return next;
    };
    const numbers = (old: number[]): number[] => {
      const next = new Array<number>(capacity).fill(0);
      for (let k = 0; k < n; k++) next[k] = old[(head + k) & mask]!;
      return next;
    };
    this.records = column(this.records)!;
    this.sizes = numbers(this.sizes);
    this.times = numbers(this.times);
    this.metas = column(this.metas);
    this.prepared = column(this.prepared);
    this.keys = column(this.keys);
    this.forced = column(this.forced);
    this.barriers = column(this.barriers);
    this.capacity = capacity;
    this.mask = capacity - 1;
    this.head = 0;
  }
}
