/**
 * The buffer: accepted records waiting for a batch, in accept order. Which of them may leave is
 * the scheduler's decision; the buffer takes them out.
 *
 * Records are held in a ring of parallel columns (record, size, accept time, and — only once a
 * record needs one — meta, prepared value, ordering key, forced reason, barriers) rather than an
 * object per record: a buffered record costs the engine about 24 bytes of heap plus 8 per column
 * in use, and a taken record's slots are cleared at once, so nothing the buffer no longer holds
 * stays reachable from it. A batch leaves as slices of the same columns (`Columns`): delivery and
 * settlement work on those, with no object per record either.
 */
import type { FlushReason, RecordMeta } from '../types.js';
import { addKey, type Barrier, type Columns, type KeyRuns } from './records.js';

/** What `take()` found. */
export type Taken<T> =
  /** A batch that may leave now, and why. */
  | { readonly batch: Columns<T>; readonly reason: FlushReason }
  /**
   * Nothing may leave yet: the due records' keys are busy. `waitUntil` is the age deadline of the
   * oldest record that could go (undefined when none could), for the timer.
   */
  | { readonly batch: undefined; readonly waitUntil: number | undefined };

export interface BatchLimits {
  readonly maxRecords: number;
  readonly maxBytes: number;
  readonly maxAgeMs: number;
}

/** The ring's smallest capacity; it doubles when full and halves when a quarter full (see take()). */
const MIN_CAPACITY = 64;
/**
 * The largest ring whose columns are renewed per batch (see cut()): 8,192 slots of 8 bytes stay
 * well below the size V8 allocates outside the young generation (128 KiB; from memory of V8's
 * `kMaxRegularHeapObjectSize`).
 */
const YOUNG_COLUMN_SLOTS = 8192;

export class RecordBuffer<T> {
  private capacity = MIN_CAPACITY;
  private mask = MIN_CAPACITY - 1;
  /** Ring position of the oldest record. */
  private head = 0;
  private n = 0;
  private records: (T | undefined)[] = new Array(MIN_CAPACITY).fill(undefined);
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
    if (meta !== undefined) (this.metas ??= this.emptyColumn())[i] = meta;
    if (prepared !== undefined) (this.prepared ??= this.emptyColumn())[i] = prepared;
    if (key !== undefined) (this.keys ??= this.emptyColumn())[i] = key;
    if (barrier !== undefined) (this.barriers ??= this.emptyColumn())[i] = [barrier];
    this.n++;
    this.bytes += bytes;
    this.lastWriteAt = acceptedAt;
  }

  /**
   * push() of a record with nothing beside it (no meta, prepared value, key or barrier). Its own
   * copy of push()'s lines, not a call into it: one more level of calls measured worse inlining.
   */
  pushPlain(record: T, bytes: number, acceptedAt: number): void {
    if (this.n === this.capacity) this.resize(this.capacity * 2);
    const i = (this.head + this.n) & this.mask;
    this.records[i] = record;
    this.sizes[i] = bytes;
    this.times[i] = acceptedAt;
    this.n++;
    this.bytes += bytes;
    this.lastWriteAt = acceptedAt;
  }

  /** Adds `barrier` to every buffered record whose metadata matches; returns how many it did. */
  holdBarrier(match: (meta: RecordMeta | undefined) => boolean, barrier: Barrier): number {
    let held = 0;
    for (let k = 0; k < this.n; k++) {
      const i = (this.head + k) & this.mask;
      if (!match(this.metas?.[i])) continue;
      const column = (this.barriers ??= this.emptyColumn());
      const list = column[i];
      if (list === undefined) column[i] = [barrier];
      else list.push(barrier);
      held++;
    }
    return held;
  }

  /** Marks the matching buffered records to leave now, for `reason`. */
  force(match: (meta: RecordMeta | undefined) => boolean, reason: FlushReason): void {
    for (let k = 0; k < this.n; k++) {
      const i = (this.head + k) & this.mask;
      if (this.forced?.[i] === undefined && match(this.metas?.[i])) {
        (this.forced ??= this.emptyColumn())[i] = reason;
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
    let taken: Columns<T>;
    let takenReason = reason;
    if (locked.size === 0 || this.keys === undefined) {
      // The oldest records, up to the batch limits: one run of the ring, copied out column by column.
      const limit = Math.min(this.n, maxRecords);
      let count = 0;
      let bytes = 0;
      while (count < limit) {
        const size = this.sizes[(this.head + count) & this.mask]!;
        if (count > 0 && bytes + size > maxBytes) break;
        bytes += size;
        count++;
      }
      taken = this.cut(count, bytes);
    } else {
      // First find what may go (nothing moves unless it is due), then take it out and close up
      // the rest in place, in order.
      const keys = this.keys;
      const chosen: number[] = [];
      let bytes = 0;
      let full = false;
      let firstAt = 0;
      let forced: FlushReason | undefined;
      for (let k = 0; k < this.n; k++) {
        const i = (this.head + k) & this.mask;
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
        if (chosen.length >= maxRecords) {
          full = true;
          break;
        }
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
      if (!due) return { batch: undefined, waitUntil: chosen.length > 0 ? firstAt + maxAgeMs : undefined };
      takenReason = due;
      taken = this.pickOut(chosen, bytes);
    }
    // Shrinks only well above a batch's worth of slots, so a buffer that fills to a batch and
    // empties again keeps its columns.
    if (this.capacity > 4 * maxRecords && this.capacity > MIN_CAPACITY && this.n <= this.capacity >> 2)
      this.resize(this.capacity >> 1);
    return { batch: taken, reason: takenReason };
  }

  /** Takes the `count` oldest records (of `bytes` in all) out of the ring. */
  private cut(count: number, bytes: number): Columns<T> {
    const start = this.head;
    const taken: Columns<T> = {
      records: this.slice(this.records, start, count) as T[],
      metas: this.metas && this.slice(this.metas, start, count),
      prepared: this.prepared && this.slice(this.prepared, start, count),
      sizes: this.slice(this.sizes, start, count),
      times: this.slice(this.times, start, count),
      keys: this.keys && this.keyRuns(start, count),
      barriers: this.barriers && this.slice(this.barriers, start, count),
      bytes,
    };
    if (this.forcedCount > 0 && this.forced !== undefined) {
      for (let k = 0; k < count; k++)
        if (this.forced[(start + k) & this.mask] !== undefined) this.forcedCount--;
    }
    // Nothing the batch took stays reachable from the ring. A ring of up to YOUNG_COLUMN_SLOTS
    // slots replaces its reference columns by new ones holding only the records that stay, at
    // the same positions (none when the whole buffer leaves, the usual case), rather than
    // clearing them: a new column is young, and storing a young record in it costs the collector
    // nothing extra, where a long-lived column costs it a remembered slot per record stored (this
    // measured ~10 % of the CPU of write() and tryWrite() in core-throughput.js; copying what
    // stays costs about what clearing what left did). A larger column would be allocated outside
    // the young generation: those rings clear in place.
    const end = start + count;
    if (this.capacity <= YOUNG_COLUMN_SLOTS) {
      const rest = this.n - count;
      const from = end & this.mask;
      this.records = this.keep(this.records, from, rest)!;
      this.metas = rest === 0 ? undefined : this.keep(this.metas, from, rest);
      this.prepared = rest === 0 ? undefined : this.keep(this.prepared, from, rest);
      this.keys = rest === 0 ? undefined : this.keep(this.keys, from, rest);
      this.forced = rest === 0 ? undefined : this.keep(this.forced, from, rest);
      this.barriers = rest === 0 ? undefined : this.keep(this.barriers, from, rest);
    } else {
      const wrap = end > this.capacity ? end - this.capacity : 0;
      for (const column of this.slotColumns()) {
        column.fill(undefined, start, end - wrap);
        if (wrap > 0) column.fill(undefined, 0, wrap);
      }
    }
    // An emptied ring starts again at slot 0: the next batch is then one run of it, not two.
    this.head = count === this.n ? 0 : end & this.mask;
    this.n -= count;
    this.bytes -= bytes;
    return taken;
  }

  /**
   * Takes the records at the `chosen` ring offsets (ascending; of `bytes` in all) out of the ring
   * and closes up the rest, in order.
   */
  private pickOut(chosen: readonly number[], bytes: number): Columns<T> {
    const n = chosen.length;
    const at = (k: number) => (this.head + k) & this.mask;
    const column = <V>(from: readonly V[] | undefined): V[] | undefined => {
      if (from === undefined) return undefined;
      const out = new Array<V>(n);
      for (let c = 0; c < n; c++) out[c] = from[at(chosen[c]!)]!;
      return out;
    };
    const taken: Columns<T> = {
      records: column(this.records) as T[],
      metas: column(this.metas),
      prepared: column(this.prepared),
      sizes: column(this.sizes)!,
      times: column(this.times)!,
      keys: this.keys && this.chosenKeyRuns(chosen),
      barriers: column(this.barriers),
      bytes,
    };
    if (this.forced !== undefined)
      for (const k of chosen) if (this.forced[at(k)] !== undefined) this.forcedCount--;
    let w = 0;
    let c = 0;
    for (let k = 0; k < this.n; k++) {
      if (c < n && chosen[c] === k) c++;
      else {
        if (w !== k) this.move(at(k), at(w));
        w++;
      }
    }
    for (let k = w; k < this.n; k++) this.clear(at(k));
    this.n = w;
    this.bytes -= bytes;
    return taken;
  }

  /** The ordering keys of `count` slots from ring position `start` on, as runs. */
  private keyRuns(start: number, count: number): KeyRuns {
    const keys = this.keys!;
    const runs = { keys: [] as string[], counts: [] as number[] };
    for (let k = 0; k < count; k++) addKey(runs, keys[(start + k) & this.mask]);
    return runs;
  }

  /** The ordering keys of the records at the `chosen` ring offsets, as runs. */
  private chosenKeyRuns(chosen: readonly number[]): KeyRuns {
    const keys = this.keys!;
    const runs = { keys: [] as string[], counts: [] as number[] };
    for (const k of chosen) addKey(runs, keys[(this.head + k) & this.mask]);
    return runs;
  }

  /** A new column holding `column`'s `count` slots from ring position `start` on, at the same positions. */
  private keep<V>(
    column: (V | undefined)[] | undefined,
    start: number,
    count: number,
  ): (V | undefined)[] | undefined {
    if (column === undefined) return undefined;
    const next = this.emptyColumn<V>();
    for (let k = 0; k < count; k++) {
      const i = (start + k) & this.mask;
      next[i] = column[i];
    }
    return next;
  }

  /** `count` slots of `column` from ring position `start` on, as a new array. */
  private slice<V>(column: V[], start: number, count: number): V[] {
    const end = start + count;
    if (end <= this.capacity) return column.slice(start, end);
    return column.slice(start).concat(column.slice(0, end - this.capacity));
  }

  /** The columns that hold references (the numeric ones hold none). */
  private slotColumns(): unknown[][] {
    const out: unknown[][] = [this.records];
    if (this.metas !== undefined) out.push(this.metas);
    if (this.prepared !== undefined) out.push(this.prepared);
    if (this.keys !== undefined) out.push(this.keys);
    if (this.forced !== undefined) out.push(this.forced);
    if (this.barriers !== undefined) out.push(this.barriers);
    return out;
  }

  /**
   * A column of the ring's capacity with every slot `undefined` (not a hole), so that a batch's
   * slice of it is a dense array.
   */
  private emptyColumn<V>(): (V | undefined)[] {
    return new Array<V | undefined>(this.capacity).fill(undefined);
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
      const next = new Array<V>(capacity).fill(undefined as V);
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
