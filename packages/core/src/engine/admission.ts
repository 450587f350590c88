/**
 * Admission: how a record gets in. It is measured (and prepared, when the adapter has a
 * `prepare()`), stamped, and accepted while there is room under the pending bounds; otherwise its
 * writer waits, first come first served, until settled records free room (backpressure).
 */
import { systemClock } from '../clock.js';
import { AbortedError } from '../errors.js';
import { defaultOrderingKey, type ResolvedOptions } from '../options.js';
import { estimateJsonBytes } from '../size.js';
import type { TypedEmitter } from '../typed-emitter.js';
import type { Prepared, RecordMeta, SinkAdapter, SinkEvents } from '../types.js';
import type { RecordBuffer } from './buffer.js';
import type { Barrier } from './records.js';
import type { Scheduler } from './scheduler.js';
import type { Settlement } from './settlement.js';
import type { SinkStats } from './stats.js';

const RESOLVED = Promise.resolve();
/** With the system clock, one clock reading stamps at most this many accepts (see acceptNow()). */
const ACCEPTS_PER_READING = 32;

interface Waiter<T> {
  readonly record: T;
  readonly meta: RecordMeta | undefined;
  readonly bytes: number;
  readonly prepared: unknown;
  readonly since: number;
  readonly barrier: Barrier | undefined;
  resolve(): void;
  reject(error: unknown): void;
  detach?: () => void;
}

export class Admission<T> {
  private readonly waiters: Waiter<T>[] = [];
  private readonly estimate: (record: T) => number;
  private readonly prepareHook: ((record: T) => Prepared) | undefined;
  /** The ordering key is the default one, which reads only the metadata. */
  private readonly keyNeedsMeta: boolean;
  private readonly systemTime: boolean;
  /** A prepared record's size is the one `prepare()` gave, unless the user gave an estimator. */
  private readonly sizeFromPrepared: boolean;
  /** acceptNow()'s reading and how many more accepts it may stamp. */
  private reading = 0;
  private readingUses = 0;
  private readingExpiry = false;
  private readonly expireReading = () => {
    this.readingUses = 0;
    this.readingExpiry = false;
  };

  constructor(
    private readonly name: string,
    adapter: SinkAdapter<T>,
    private readonly o: ResolvedOptions<T>,
    private readonly buffer: RecordBuffer<T>,
    private readonly scheduler: Scheduler<T>,
    private readonly settlement: Settlement<T>,
    private readonly stats: SinkStats,
    private readonly events: TypedEmitter<SinkEvents>,
    /** Called when a record is accepted while nothing is pending (the sink then holds the process open). */
    private readonly onAccept: () => void,
    /** Writers are let in only while the sink is open (close() admits the waiting ones itself). */
    private readonly isOpen: () => boolean,
  ) {
    this.estimate = o.estimateBytes ?? adapter.estimateBytes?.bind(adapter) ?? estimateJsonBytes;
    this.prepareHook = adapter.prepare?.bind(adapter);
    this.keyNeedsMeta = o.orderingKey === defaultOrderingKey;
    this.sizeFromPrepared = o.estimateBytes === undefined;
    this.systemTime = o.clock === systemClock;
  }

  /** Writers waiting for room. */
  get waiting(): number {
    return this.waiters.length;
  }

  /** Records accepted and not yet terminal (buffered + in flight). */
  pendingRecords = 0;

  /** Their estimated bytes. */
  get pendingBytes(): number {
    return this.buffer.bytes + this.scheduler.inflightBytes;
  }

  /** Records became terminal: they no longer count against the pending bounds. */
  released(records: number): void {
    this.pendingRecords -= records;
  }

  /** Accepts now when there is room and nobody waits; otherwise waits for room. */
  write(
    record: T,
    meta: RecordMeta | undefined,
    signal: AbortSignal | undefined,
    barrier: Barrier | undefined,
  ): Promise<void> {
    const prepared = this.prepare(record);
    const bytes = this.sizeOf(record, prepared);
    if (this.waiters.length === 0 && this.hasRoom(bytes)) {
      this.accept(record, meta, bytes, prepared?.value, barrier);
      return RESOLVED;
    }
    return this.wait(record, meta, bytes, prepared?.value, signal, barrier);
  }

  /** Accepts and returns true when there is room and nobody waits; false otherwise. */
  tryWrite(record: T, meta: RecordMeta | undefined): boolean {
    const prepared = this.prepare(record);
    const bytes = this.sizeOf(record, prepared);
    if (this.waiters.length > 0 || !this.hasRoom(bytes)) return false;
    this.accept(record, meta, bytes, prepared?.value, undefined);
    return true;
  }

  /**
   * Accepts from the front of `records` while there is room. One clock read serves the call, and
   * the scheduler hears of the accepted records once, after the last (a batch that became full
   * on the way starts then, still within this call).
   */
  tryWriteMany(records: readonly T[], metas: readonly (RecordMeta | undefined)[] | undefined): number {
    if (this.waiters.length > 0) return 0;
    const now = this.o.clock.now();
    const n =
      metas === undefined && this.prepareHook === undefined && this.keyNeedsMeta
        ? this.enterPlain(records, now)
        : this.enterEach(records, metas, now);
    if (n > 0) this.scheduler.accepted();
    return n;
  }

  /** tryWriteMany() for records with nothing beside them (see enter()): a tighter loop. */
  private enterPlain(records: readonly T[], now: number): number {
    const first = this.pendingRecords === 0;
    let n = 0;
    for (; n < records.length; n++) {
      const record = records[n]!;
      const bytes = this.sizeOf(record, undefined);
      if (!this.hasRoom(bytes)) break;
      this.pendingRecords++;
      this.buffer.pushPlain(record, bytes, now);
    }
    this.stats.accepted += n;
    if (first && n > 0) this.onAccept();
    return n;
  }

  private enterEach(
    records: readonly T[],
    metas: readonly (RecordMeta | undefined)[] | undefined,
    now: number,
  ): number {
    let n = 0;
    for (; n < records.length; n++) {
      const record = records[n]!;
      const prepared = this.prepare(record);
      const bytes = this.sizeOf(record, prepared);
      if (!this.hasRoom(bytes)) break;
      this.enter(record, metas?.[n], bytes, prepared?.value, undefined, now);
    }
    return n;
  }

  /** The adapter's per-record work, done at accept; undefined without a hook or when it threw. */
  private prepare(record: T): Prepared | undefined {
    if (this.prepareHook === undefined) return undefined;
    try {
      return this.prepareHook(record);
    } catch {
      return undefined;
    }
  }

  /** The record's size in bytes (the prepared size, unless the user gave an estimator). */
  private sizeOf(record: T, prepared: Prepared | undefined): number {
    const n = prepared === undefined || !this.sizeFromPrepared ? this.estimate(record) : prepared.bytes;
    return Number.isFinite(n) && n > 0 ? n : 1;
  }

  /**
   * Room for one more record of `bytes` under the pending bounds. Against `maxPendingBytes` each
   * record counts as its estimated bytes plus `recordOverheadBytes` (what it holds on the heap
   * beyond them).
   */
  private hasRoom(bytes: number): boolean {
    const pending = this.pendingRecords;
    if (pending >= this.o.maxPendingRecords) return false;
    // A single record larger than the byte bound still goes through when nothing is pending.
    return (
      pending === 0 ||
      this.pendingBytes + bytes + (pending + 1) * this.o.recordOverheadBytes <= this.o.maxPendingBytes
    );
  }

  private accept(
    record: T,
    meta: RecordMeta | undefined,
    bytes: number,
    prepared: unknown,
    barrier: Barrier | undefined,
  ): void {
    this.enter(record, meta, bytes, prepared, barrier, this.acceptNow());
    this.scheduler.accepted();
  }

  /** Counts an accepted record and buffers it; the caller tells the scheduler. */
  private enter(
    record: T,
    meta: RecordMeta | undefined,
    bytes: number,
    prepared: unknown,
    barrier: Barrier | undefined,
    now: number,
  ): void {
    // The default ordering key comes from the metadata alone: no call for a record without it.
    const key = meta === undefined && this.keyNeedsMeta ? undefined : this.o.orderingKey(record, meta);
    if (barrier) this.settlement.hold(barrier);
    if (meta !== undefined) this.settlement.track(meta);
    const first = this.pendingRecords === 0;
    this.pendingRecords++;
    // One push whatever the record carries: a branch here to pushPlain() measured ~20 % more
    // instructions per tryWrite() (V8 inlined the hot path worse).
    this.buffer.push(record, meta, bytes, prepared, now, key, barrier);
    this.stats.accepted++;
    // Nothing was pending: the sink now holds the process open (it lets go when all is settled).
    if (first) this.onAccept();
  }

  /**
   * The accept time. With the system clock a reading (≈ 60 ns here, a sixth of an accept) serves
   * up to ACCEPTS_PER_READING accepts within one turn of the event loop: a stamp can only be
   * early, by the time those few accepts took, so records leave by age no later than they should
   * and accept → durable latency reads at most that much longer. Any other clock is read every time.
   */
  private acceptNow(): number {
    if (!this.systemTime) return this.o.clock.now();
    if (this.readingUses > 0) {
      this.readingUses--;
      return this.reading;
    }
    this.reading = performance.now();
    this.readingUses = ACCEPTS_PER_READING - 1;
    if (!this.readingExpiry) {
      this.readingExpiry = true;
      setImmediate(this.expireReading);
    }
    return this.reading;
  }

  private wait(
    record: T,
    meta: RecordMeta | undefined,
    bytes: number,
    prepared: unknown,
    signal: AbortSignal | undefined,
    barrier: Barrier | undefined,
  ): Promise<void> {
    if (signal?.aborted) return Promise.reject(new AbortedError('write()', signal.reason));
    return new Promise<void>((resolve, reject) => {
      const waiter: Waiter<T> = {
        record,
        meta,
        bytes,
        prepared,
        since: this.o.clock.now(),
        barrier,
        resolve,
        reject,
      };
      if (signal) {
        const onAbort = () => {
          const i = this.waiters.indexOf(waiter);
          if (i >= 0) this.waiters.splice(i, 1);
          reject(new AbortedError('write()', signal.reason));
          this.wake();
        };
        signal.addEventListener('abort', onAbort, { once: true });
        waiter.detach = () => signal.removeEventListener('abort', onAbort);
      }
      this.waiters.push(waiter);
      // Writers are waiting: whatever is buffered should leave as soon as a slot allows.
      this.scheduler.pump();
    });
  }

  /** Lets waiting writers in, in arrival order, while there is room and the sink is open. */
  wake(): void {
    while (this.waiters.length > 0 && this.isOpen()) {
      const w = this.waiters[0]!;
      if (!this.hasRoom(w.bytes)) break;
      this.waiters.shift();
      this.admit(w);
    }
  }

  /** Close began: every waiting writer's record joins the final flush, beyond the bound. */
  admitAll(): void {
    for (const w of this.waiters.splice(0)) this.admit(w);
  }

  /** The sink failed: every waiting writer rejects with `error`. */
  rejectAll(error: unknown): void {
    for (const w of this.waiters.splice(0)) {
      w.detach?.();
      w.reject(error);
    }
  }

  private admit(w: Waiter<T>): void {
    w.detach?.();
    const waited = this.o.clock.now() - w.since;
    this.stats.backpressureWaits++;
    this.stats.backpressureWaitMsTotal += waited;
    this.stats.backpressureWaitMs.record(waited);
    this.events.emit('backpressure', { sink: this.name, waitedMs: waited });
    this.accept(w.record, w.meta, w.bytes, w.prepared, w.barrier);
    w.resolve();
  }
}
