import { EventEmitter } from 'node:events';
import { sleep, systemClock } from './clock.js';
import {
  AbortedError,
  messageOf,
  type PendingCounts,
  ShutdownTimeoutError,
  SinkClosedError,
  SinkFailedError,
  SpillwayError,
} from './errors.js';
import { type ExitFlushable, holdExit, releaseExit } from './exit-net.js';
import { Histogram } from './metrics.js';
import {
  invalidOption,
  numberOption,
  type ResolvedOptions,
  resolveOptions,
  type SinkOptions,
} from './options.js';
import { ProgressTracker } from './progress.js';
import { fullJitterDelay } from './retry.js';
import { estimateJsonBytes } from './size.js';
import {
  type Batch,
  type DeadLetter,
  type DeadLetterReason,
  FLUSH_REASONS,
  type FlushReason,
  type PartialWrite,
  type Prepared,
  type RecordMeta,
  type SinkAdapter,
  type SinkCounters,
  type SinkEventName,
  type SinkEvents,
  type SinkSnapshot,
  type SinkState,
} from './types.js';

/** One accepted record and what the engine knows about it. */
interface Entry<T> {
  readonly record: T;
  readonly meta: RecordMeta | undefined;
  readonly bytes: number;
  /** The adapter's `prepare()` result, if it has one. */
  readonly prepared: unknown;
  readonly acceptedAt: number;
  readonly key: string | undefined;
  /** Set when a manual / shutdown / revoke flush asked for this record to leave now. */
  forced: FlushReason | undefined;
  /** Waits (flush(), revoke(), writeDurable()) that this record holds open. */
  barriers: Barrier[] | undefined;
  /** True once durable or dead-lettered. */
  done: boolean;
}

/** Resolves when `remaining` records have become terminal. */
interface Barrier {
  remaining: number;
  resolve(): void;
  reject(error: unknown): void;
  onOutcome?: (outcome: 'durable' | 'dead-lettered') => void;
}

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

interface InFlight<T> {
  readonly id: number;
  readonly entries: Entry<T>[];
  /** Records of this batch not yet terminal. */
  open: number;
  retrying: number;
}

export interface WriteOptions {
  /** Cancels a write that is waiting for room. */
  signal?: AbortSignal;
}

export interface CloseOptions {
  /** Reject if not every record is terminal by then. @default 30000 */
  timeoutMs?: number;
  /**
   * What a `write()` that arrives after close() began gets.
   * - `reject`: it rejects with `SPILLWAY_SINK_CLOSED` (and `tryWrite()` throws): writing to a
   *   sink your own code closed is a bug in that code, and it should hear about it.
   * - `park`: it never settles and its record is not accepted (`tryWrite()` returns false,
   *   `tryWriteMany()` 0), so a producer loop that awaits `write()` simply stops where it is.
   *   The shutdown coordinator closes sinks this way: a signal must not turn the caller's own
   *   loop into an unhandled rejection that kills the process before the final flush.
   * A later close() can turn `reject` into `park`, never the other way.
   * @default 'reject'
   */
  laterWrites?: 'reject' | 'park';
}

const RESOLVED = Promise.resolve();
/** What a write gets after a `laterWrites: 'park'` close: a promise that never settles. */
const PARKED = new Promise<void>(() => {});
const PARK = Symbol('park');
/** With the system clock, one clock reading stamps at most this many accepts (see acceptNow()). */
const ACCEPTS_PER_READING = 32;
/** Resolution of the accept → durable distribution: 10 µs. */
const LATENCY_STEPS_PER_MS = 100;

/** Progress key of a record's source partition. */
export function progressKey(meta: RecordMeta): string {
  return meta.topic === undefined ? String(meta.partition ?? '') : `${meta.topic}:${meta.partition ?? ''}`;
}

/**
 * A buffered sink: accepts records one at a time and writes them to its adapter in batches that
 * leave by size, bytes, age, idle time, or on request. Every accepted record ends exactly once as
 * durable or dead-lettered.
 */
export class Sink<T> implements ExitFlushable {
  readonly name: string;
  readonly kind: string;
  /** Commit points per source partition, over records that carried an offset. */
  readonly progress = new ProgressTracker();

  private readonly adapter: SinkAdapter<T>;
  private readonly o: ResolvedOptions<T>;
  private readonly events = new EventEmitter();
  private readonly estimate: (record: T) => number;
  private readonly prepareHook: ((record: T) => Prepared) | undefined;
  /** What the last sizeOf() call prepared (read right after it, by the same caller). */
  private prepared: unknown;
  /** acceptNow()'s reading and how many more accepts it may stamp. */
  private reading = 0;
  private readingUses = 0;
  private readingExpiry = false;
  private readonly expireReading = () => {
    this.readingUses = 0;
    this.readingExpiry = false;
  };

  private stateValue: SinkState = 'open';
  private fatal: unknown;
  private closing: Promise<void> | undefined;
  /** Set by a `laterWrites: 'park'` close: later writes park instead of rejecting. */
  private parkLaterWrites = false;
  /** Registered with the exit net (holds records that are not terminal). */
  private holdingExit = false;

  // The buffer is a FIFO array read from `head`; compacted now and then.
  private buffer: Entry<T>[] = [];
  private head = 0;
  private bufferedBytes = 0;
  private forcedCount = 0;
  private forcedReason: FlushReason = 'manual';
  private lastWriteAt = 0;

  private readonly inflight = new Set<InFlight<T>>();
  private inflightRecords = 0;
  private inflightBytes = 0;
  private readonly lockedKeys = new Map<string, number>();
  private nextBatchId = 1;
  /** When a flush first became due without a free slot (or with every due key busy). */
  private slotWaitSince: number | undefined;
  /** Age deadline of the oldest record that could go but is not due yet (see take()). */
  private keyWaitAt: number | undefined;
  /** Set by take() when it skipped busy keys: why the records it took are due. */
  private takenReason: FlushReason | undefined;

  private timer: unknown;
  private timerAt = Number.POSITIVE_INFINITY;

  private readonly waiters: Waiter<T>[] = [];
  private readonly barriers = new Set<Barrier>();

  // metrics
  private accepted = 0;
  private written = 0;
  private deadLettered = 0;
  private retries = 0;
  private batches = 0;
  private backpressureWaits = 0;
  private backpressureWaitMsTotal = 0;
  private readonly flushes = Object.fromEntries(FLUSH_REASONS.map((r) => [r, 0])) as Record<
    FlushReason,
    number
  >;
  private readonly h = {
    batchRecords: new Histogram(1),
    batchBytes: new Histogram(1),
    flushDurationMs: new Histogram(1000),
    acceptToDurableMs: new Histogram(LATENCY_STEPS_PER_MS),
    eventToDurableMs: new Histogram(1000),
    slotWaitMs: new Histogram(1000),
    backpressureWaitMs: new Histogram(1000),
  };

  constructor(adapter: SinkAdapter<T>, options?: SinkOptions<T>) {
    if (!adapter || typeof adapter.write !== 'function' || typeof adapter.classify !== 'function') {
      throw invalidOption('adapter', 'a SinkAdapter with write() and classify()', adapter);
    }
    this.adapter = adapter;
    this.kind = adapter.kind;
    this.o = resolveOptions(options, adapter.kind);
    this.name = this.o.name;
    const own = this.o.estimateBytes ?? adapter.estimateBytes?.bind(adapter);
    this.estimate = own ?? estimateJsonBytes;
    this.prepareHook = adapter.prepare?.bind(adapter);
    this.lastWriteAt = this.o.clock.now();
  }

  get state(): SinkState {
    return this.stateValue;
  }

  get options(): Readonly<ResolvedOptions<T>> {
    return this.o;
  }

  // ---------------------------------------------------------------- accepting

  /**
   * Accepts a record. Resolves at once when there is room under the pending bounds, otherwise
   * when room frees up (or rejects with `SPILLWAY_ABORTED` when `signal` aborts). A write still
   * waiting for room when close() begins is accepted into the final flush (beyond the bound, by
   * at most the number of waiting writers) and resolves. After close() began, a new write rejects
   * with `SPILLWAY_SINK_CLOSED`, or never settles when the close was `laterWrites: 'park'` (the
   * shutdown coordinator's); after a fatal error it rejects with `SPILLWAY_SINK_FAILED`.
   */
  write(record: T, meta?: RecordMeta, options?: WriteOptions): Promise<void> {
    return this.enqueue(record, meta, options?.signal, undefined);
  }

  private enqueue(
    record: T,
    meta: RecordMeta | undefined,
    signal: AbortSignal | undefined,
    barrier: Barrier | undefined,
  ): Promise<void> {
    const refused = this.refusal();
    if (refused === PARK) return PARKED;
    if (refused) return Promise.reject(refused);
    const bytes = this.sizeOf(record);
    const prepared = this.prepared;
    if (this.waiters.length === 0 && this.hasRoom(bytes)) {
      this.accept(record, meta, bytes, prepared, barrier);
      return RESOLVED;
    }
    return this.wait(record, meta, bytes, prepared, signal, barrier);
  }

  /**
   * Synchronous fast path for hot loops: accepts and returns true when there is room, returns
   * false when the caller must wait (then use `write()` or `drained()`). Throws when closed, or
   * returns false when the close parks later writes (see `CloseOptions.laterWrites`).
   */
  tryWrite(record: T, meta?: RecordMeta): boolean {
    const refused = this.refusal();
    if (refused === PARK) return false;
    if (refused) throw refused;
    const bytes = this.sizeOf(record);
    if (this.waiters.length > 0 || !this.hasRoom(bytes)) return false;
    this.accept(record, meta, bytes, this.prepared, undefined);
    return true;
  }

  /**
   * Synchronous fast path for many records at once: accepts records from the front of `records`
   * while there is room and returns how many it took (the caller writes the rest later). One clock
   * read serves the whole call. After close() it throws, or returns 0 as `tryWrite()` returns false.
   */
  tryWriteMany(records: readonly T[], metas?: readonly (RecordMeta | undefined)[]): number {
    const refused = this.refusal();
    if (refused === PARK) return 0;
    if (refused) throw refused;
    if (this.waiters.length > 0) return 0;
    const now = this.o.clock.now();
    let n = 0;
    for (; n < records.length; n++) {
      const record = records[n]!;
      const bytes = this.sizeOf(record);
      if (!this.hasRoom(bytes)) break;
      this.accept(record, metas?.[n], bytes, this.prepared, undefined, now);
    }
    return n;
  }

  /** Accepts a record and resolves once it is terminal, with its outcome. */
  async writeDurable(
    record: T,
    meta?: RecordMeta,
    options?: WriteOptions,
  ): Promise<'durable' | 'dead-lettered'> {
    let outcome: 'durable' | 'dead-lettered' = 'durable';
    let barrier: Barrier | undefined;
    const done = new Promise<void>((resolve, reject) => {
      barrier = { remaining: 1, resolve, reject, onOutcome: (o) => (outcome = o) };
    });
    await this.enqueue(record, meta, options?.signal, barrier);
    await done;
    return outcome;
  }

  private refusal(): SpillwayError | typeof PARK | undefined {
    if (this.stateValue === 'failed') return new SinkFailedError(this.name, this.fatal);
    if (this.stateValue !== 'open') return this.parkLaterWrites ? PARK : new SinkClosedError(this.name);
    return undefined;
  }

  /** The record's size in bytes; with an adapter `prepare()`, also sets `this.prepared`. */
  private sizeOf(record: T): number {
    let n: number;
    if (this.prepareHook === undefined) n = this.estimate(record);
    else {
      let p: Prepared | undefined;
      try {
        p = this.prepareHook(record);
      } catch {
        p = undefined;
      }
      this.prepared = p?.value;
      n = this.o.estimateBytes !== undefined || p === undefined ? this.estimate(record) : p.bytes;
    }
    return Number.isFinite(n) && n > 0 ? n : 1;
  }

  private get pendingRecords(): number {
    return this.bufferedCount + this.inflightRecords;
  }

  private get pendingBytes(): number {
    return this.bufferedBytes + this.inflightBytes;
  }

  private get bufferedCount(): number {
    return this.buffer.length - this.head;
  }

  private hasRoom(bytes: number): boolean {
    if (this.pendingRecords + 1 > this.o.maxPendingRecords) return false;
    // A single record larger than the byte bound still goes through when nothing is pending.
    return this.pendingRecords === 0 || this.pendingBytes + bytes <= this.o.maxPendingBytes;
  }

  private accept(
    record: T,
    meta: RecordMeta | undefined,
    bytes: number,
    prepared: unknown,
    barrier: Barrier | undefined,
    at?: number,
  ): void {
    const now = at ?? this.acceptNow();
    const entry: Entry<T> = {
      record,
      meta,
      bytes,
      prepared,
      acceptedAt: now,
      key: this.o.orderingKey(record, meta),
      forced: undefined,
      barriers: undefined,
      done: false,
    };
    if (barrier) {
      this.barriers.add(barrier);
      entry.barriers = [barrier];
    }
    if (meta?.offset !== undefined && meta.externalProgress !== true)
      this.progress.track(progressKey(meta), meta.offset);
    this.buffer.push(entry);
    this.bufferedBytes += bytes;
    this.accepted++;
    if (!this.holdingExit) {
      this.holdingExit = true;
      holdExit(this);
    }
    this.lastWriteAt = now;
    if (this.bufferedCount >= this.o.maxRecords || this.bufferedBytes >= this.o.maxBytes) this.pump();
    else if (this.timer === undefined) this.arm();
  }

  /**
   * The accept time. With the system clock a reading (≈ 60 ns here, a sixth of an accept) serves
   * up to ACCEPTS_PER_READING accepts within one turn of the event loop: a stamp can only be
   * early, by the time those few accepts took, so records leave by age no later than they should
   * and accept → durable latency reads at most that much longer. Any other clock is read every time.
   */
  private acceptNow(): number {
    if (this.o.clock !== systemClock) return this.o.clock.now();
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
      this.pump();
    });
  }

  /** Lets waiting writers in, in arrival order, while there is room. */
  private wake(): void {
    while (this.waiters.length > 0 && this.stateValue === 'open') {
      const w = this.waiters[0]!;
      if (!this.hasRoom(w.bytes)) break;
      this.waiters.shift();
      this.admit(w);
    }
  }

  /** Accepts a waiting writer's record and resolves its write(). */
  private admit(w: Waiter<T>): void {
    w.detach?.();
    const waited = this.o.clock.now() - w.since;
    this.backpressureWaits++;
    this.backpressureWaitMsTotal += waited;
    this.h.backpressureWaitMs.record(waited);
    this.emit('backpressure', { sink: this.name, waitedMs: waited });
    this.accept(w.record, w.meta, w.bytes, w.prepared, w.barrier);
    w.resolve();
  }

  // ---------------------------------------------------------------- flushing

  /** The reason a batch is due now, if one is. */
  private dueReason(now: number): FlushReason | undefined {
    const n = this.bufferedCount;
    if (n === 0) return undefined;
    if (this.forcedCount > 0) return this.forcedReason;
    if (n >= this.o.maxRecords) return 'size';
    if (this.bufferedBytes >= this.o.maxBytes) return 'bytes';
    if (now - this.buffer[this.head]!.acceptedAt >= this.o.maxAgeMs) return 'age';
    if (this.o.idleMs > 0 && now - this.lastWriteAt >= this.o.idleMs) return 'idle';
    // Writers are blocked on the pending bound: the buffer is as full as it may get.
    if (this.waiters.length > 0) return 'size';
    return undefined;
  }

  /** Starts every batch that is due and has a free slot, then arms the timer for the next deadline. */
  private pump(): void {
    if (this.stateValue === 'failed') return;
    const now = this.o.clock.now();
    this.keyWaitAt = undefined;
    for (;;) {
      const reason = this.dueReason(now);
      if (reason === undefined) {
        this.slotWaitSince = undefined;
        break;
      }
      if (this.inflight.size >= this.o.concurrency) {
        this.slotWaitSince ??= now;
        break;
      }
      this.takenReason = undefined;
      const entries = this.take(reason, now);
      if (entries.length === 0) {
        // The due records' keys have batches in flight (their completion pumps again), and what
        // could go now is not itself due (`keyWaitAt` arms the timer for it).
        this.slotWaitSince ??= now;
        break;
      }
      this.start(entries, this.takenReason ?? reason, now);
    }
    this.arm();
  }

  /**
   * Takes the next batch from the buffer, skipping keys that have a batch in flight. When keys are
   * skipped, the records that could go must themselves be due (full, old, forced, or idle):
   * otherwise a buffer held up by one busy key would leak out in tiny batches.
   */
  private take(reason: FlushReason, now: number): Entry<T>[] {
    const { maxRecords, maxBytes, maxAgeMs } = this.o;
    const out: Entry<T>[] = [];
    let bytes = 0;
    if (this.lockedKeys.size === 0) {
      while (this.head < this.buffer.length && out.length < maxRecords) {
        const e = this.buffer[this.head]!;
        if (out.length > 0 && bytes + e.bytes > maxBytes) break;
        out.push(e);
        bytes += e.bytes;
        this.head++;
      }
    } else {
      const rest: Entry<T>[] = [];
      let full = false;
      for (let i = this.head; i < this.buffer.length; i++) {
        const e = this.buffer[i]!;
        if (full || (e.key !== undefined && this.lockedKeys.has(e.key))) {
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
      this.takenReason = due;
      if (!due) {
        this.keyWaitAt = out.length > 0 ? out[0]!.acceptedAt + maxAgeMs : undefined;
        return [];
      }
      this.buffer = rest;
      this.head = 0;
    }
    if (this.head > 4096 && this.head * 2 > this.buffer.length) {
      this.buffer = this.buffer.slice(this.head);
      this.head = 0;
    }
    this.bufferedBytes -= bytes;
    for (const e of out) if (e.forced !== undefined) this.forcedCount--;
    return out;
  }

  private start(entries: Entry<T>[], reason: FlushReason, now: number): void {
    const id = this.nextBatchId++;
    const batch: InFlight<T> = { id, entries, open: entries.length, retrying: 0 };
    let bytes = 0;
    for (const e of entries) {
      bytes += e.bytes;
      if (e.key !== undefined) this.lockedKeys.set(e.key, (this.lockedKeys.get(e.key) ?? 0) + 1);
    }
    this.inflight.add(batch);
    this.inflightRecords += entries.length;
    this.inflightBytes += bytes;
    this.batches++;
    this.flushes[reason]++;
    this.h.batchRecords.record(entries.length);
    this.h.batchBytes.record(bytes);
    const slotWaitMs = this.slotWaitSince === undefined ? 0 : now - this.slotWaitSince;
    this.slotWaitSince = undefined;
    this.h.slotWaitMs.record(slotWaitMs);
    this.emit('flush', { sink: this.name, batchId: id, reason, records: entries.length, bytes, slotWaitMs });
    void this.run(batch, reason);
  }

  private async run(batch: InFlight<T>, reason: FlushReason): Promise<void> {
    try {
      await this.deliver(batch, reason, batch.entries);
    } catch (error) {
      // deliver() handles store errors itself; anything reaching here is a bug in an adapter hook.
      this.fail(error);
    } finally {
      this.inflight.delete(batch);
      for (const e of batch.entries) {
        if (e.key === undefined) continue;
        const n = (this.lockedKeys.get(e.key) ?? 1) - 1;
        if (n <= 0) this.lockedKeys.delete(e.key);
        else this.lockedKeys.set(e.key, n);
      }
      // The next batch goes first: its write starts (and, where the adapter sends right away,
      // reaches the store) before waiting writers refill the buffer. When one did start, writers
      // are let in on the next turn of the event loop, after the connection work the adapter
      // queued for it (a pool checkout, a socket write); otherwise right away.
      const started = this.batches;
      this.pump();
      if (this.batches === started || this.waiters.length === 0) this.wake();
      else setImmediate(() => this.wake());
    }
  }

  /**
   * Writes `entries` with the retry / split / fatal policy. Sub-batches of a split are written one
   * after the other, so records of one key keep their order.
   */
  private async deliver(batch: InFlight<T>, reason: FlushReason, entries: Entry<T>[]): Promise<void> {
    const clock = this.o.clock;
    const { maxAttempts, baseDelayMs, maxDelayMs, maxElapsedMs } = this.o.retry;
    const firstTry = clock.now();
    let current = entries;
    for (let attempt = 1; ; attempt++) {
      if (this.stateValue === 'failed') return;
      const started = clock.now();
      let error: unknown;
      let failed = false;
      let outcome: PartialWrite | undefined;
      try {
        outcome = (await this.adapter.write(this.toBatch(batch.id, reason, attempt, current))) ?? undefined;
      } catch (e) {
        failed = true;
        error = e;
      }
      const durationMs = clock.now() - started;
      this.h.flushDurationMs.record(durationMs);

      if (!failed) {
        const rejected = outcome?.rejected ?? [];
        if (rejected.length === 0) {
          this.settle(batch, current, 'durable');
          this.emit('written', {
            sink: this.name,
            batchId: batch.id,
            records: current.length,
            bytes: sumBytes(current),
            durationMs,
            attempts: attempt,
          });
          return;
        }
        // Some records landed, some did not: settle the landed ones first (the store acknowledged
        // them, whatever happens next), then act on each refusal.
        const refusedIdx = new Set<number>();
        const toRetry: Entry<T>[] = [];
        const toDeadLetter: Array<{ entry: Entry<T>; error: unknown }> = [];
        let fatal: { error: unknown } | undefined;
        for (const r of rejected) {
          const entry = current[r.index];
          if (!entry || refusedIdx.has(r.index)) continue;
          refusedIdx.add(r.index);
          const cls = this.classify(r.error);
          if (cls === 'fatal') fatal ??= { error: r.error };
          else if (cls === 'retry') {
            toRetry.push(entry);
            error = r.error;
          } else toDeadLetter.push({ entry, error: r.error });
        }
        const landed = current.filter((_, i) => !refusedIdx.has(i));
        if (landed.length > 0) {
          this.settle(batch, landed, 'durable');
          this.emit('written', {
            sink: this.name,
            batchId: batch.id,
            records: landed.length,
            bytes: sumBytes(landed),
            durationMs,
            attempts: attempt,
          });
        }
        if (fatal) {
          this.fail(fatal.error);
          return;
        }
        for (const d of toDeadLetter) {
          if (!(await this.deadLetter(batch, [d.entry], 'rejected', d.error))) return;
        }
        if (toRetry.length === 0) return;
        current = toRetry;
      } else {
        const cls = this.classify(error);
        if (cls === 'fatal') {
          this.fail(error);
          return;
        }
        if (cls === 'split') {
          if (current.length === 1) {
            await this.deadLetter(batch, current, 'rejected', error);
            return;
          }
          const mid = current.length >> 1;
          await this.deliver(batch, reason, current.slice(0, mid));
          await this.deliver(batch, reason, current.slice(mid));
          return;
        }
      }

      // retry
      const elapsed = clock.now() - firstTry;
      if (attempt >= maxAttempts || elapsed >= maxElapsedMs) {
        const exhausted = new SpillwayError(
          'SPILLWAY_RETRIES_EXHAUSTED',
          `Gave up after ${attempt} attempt(s) over ${Math.round(elapsed)} ms: ${messageOf(error)}`,
          { cause: error, details: { attempts: attempt, elapsedMs: Math.round(elapsed) } },
        );
        await this.deadLetter(batch, current, 'retries-exhausted', exhausted);
        return;
      }
      const delayMs = Math.min(
        fullJitterDelay(attempt - 1, baseDelayMs, maxDelayMs),
        Math.max(0, maxElapsedMs - elapsed),
      );
      this.retries++;
      this.emit('retry', { sink: this.name, batchId: batch.id, attempt, delayMs, error });
      batch.retrying += current.length;
      try {
        await sleep(clock, delayMs);
      } finally {
        batch.retrying -= current.length;
      }
    }
  }

  private classify(error: unknown): 'retry' | 'split' | 'fatal' {
    try {
      const cls = this.adapter.classify(error);
      return cls === 'retry' || cls === 'split' ? cls : 'fatal';
    } catch {
      return 'fatal';
    }
  }

  private toBatch(id: number, reason: FlushReason, attempt: number, entries: Entry<T>[]): Batch<T> {
    const records = new Array<T>(entries.length);
    const metas = new Array<RecordMeta | undefined>(entries.length);
    const prepared = this.prepareHook === undefined ? undefined : new Array<unknown>(entries.length);
    let bytes = 0;
    for (let i = 0; i < entries.length; i++) {
      const e = entries[i]!;
      records[i] = e.record;
      metas[i] = e.meta;
      bytes += e.bytes;
      if (prepared !== undefined) prepared[i] = e.prepared;
    }
    return prepared === undefined
      ? { id, reason, attempt, records, metas, bytes }
      : { id, reason, attempt, records, metas, bytes, prepared };
  }

  /** Hands records to the dead-letter target; false when that failed (the sink is then failed). */
  private async deadLetter(
    batch: InFlight<T>,
    entries: Entry<T>[],
    reason: DeadLetterReason,
    error: unknown,
  ): Promise<boolean> {
    const target = this.o.deadLetter;
    if (!target) {
      this.fail(
        new SpillwayError(
          'SPILLWAY_NO_DEAD_LETTER_TARGET',
          `Sink "${this.name}" has ${entries.length} record(s) to dead-letter (${reason}: ${messageOf(error)}) but no \`deadLetter\` target`,
          { cause: error },
        ),
      );
      return false;
    }
    const time = this.o.clock.wallNow();
    const letters: DeadLetter<T>[] = entries.map((e) => ({
      sink: this.name,
      record: e.record,
      meta: e.meta,
      reason,
      error,
      time,
    }));
    try {
      await target.write(letters);
    } catch (e) {
      this.fail(
        new SpillwayError(
          'SPILLWAY_DEAD_LETTER_FAILED',
          `Dead-letter target of sink "${this.name}" failed: ${messageOf(e)}`,
          { cause: e },
        ),
      );
      return false;
    }
    this.settle(batch, entries, 'dead-lettered');
    this.emit('dead-letter', { sink: this.name, batchId: batch.id, count: entries.length, reason, error });
    return true;
  }

  /** Marks records terminal: metrics, progress, barriers, and room for waiting writers. */
  private settle(batch: InFlight<T>, entries: Entry<T>[], outcome: 'durable' | 'dead-lettered'): void {
    const now = this.o.clock.now();
    const wall = this.o.clock.wallNow();
    const wantEvent = this.events.listenerCount('settled') > 0;
    const latencies: number[] = wantEvent ? new Array(entries.length) : [];
    let bytes = 0;
    // Consecutive records accepted within one histogram step share a value: record them as a
    // run, which keeps the per-record cost of the latency distribution near zero.
    const durable = outcome === 'durable';
    let runValue = Number.NaN;
    let runCount = 0;
    let eventValue = Number.NaN;
    let eventCount = 0;
    for (let i = 0; i < entries.length; i++) {
      const e = entries[i]!;
      e.done = true;
      bytes += e.bytes;
      const latency = now - e.acceptedAt;
      if (wantEvent) latencies[i] = latency;
      if (durable) {
        const v = Math.round(latency * LATENCY_STEPS_PER_MS) / LATENCY_STEPS_PER_MS;
        if (v === runValue) runCount++;
        else {
          if (runCount > 0) this.h.acceptToDurableMs.recordMany(runValue, runCount);
          runValue = v;
          runCount = 1;
        }
        const eventTime = e.meta?.eventTime;
        if (eventTime !== undefined) {
          // Source timestamps are in whole milliseconds: neighbours mostly share one.
          const ev = wall - eventTime;
          if (ev === eventValue) eventCount++;
          else {
            if (eventCount > 0) this.h.eventToDurableMs.recordMany(eventValue, eventCount);
            eventValue = ev;
            eventCount = 1;
          }
        }
      }
      if (e.meta?.offset !== undefined && e.meta.externalProgress !== true)
        this.progress.complete(progressKey(e.meta), e.meta.offset);
      if (e.barriers) {
        for (const b of e.barriers) {
          b.onOutcome?.(outcome);
          if (--b.remaining === 0) {
            this.barriers.delete(b);
            b.resolve();
          }
        }
        e.barriers = undefined;
      }
    }
    if (runCount > 0) this.h.acceptToDurableMs.recordMany(runValue, runCount);
    if (eventCount > 0) this.h.eventToDurableMs.recordMany(eventValue, eventCount);
    if (outcome === 'durable') this.written += entries.length;
    else this.deadLettered += entries.length;
    batch.open -= entries.length;
    this.inflightRecords -= entries.length;
    this.inflightBytes -= bytes;
    if (this.pendingRecords === 0) this.releaseExitHold();
    if (wantEvent) {
      this.emit('settled', {
        sink: this.name,
        outcome,
        metas: entries.map((e) => e.meta),
        latenciesMs: latencies,
      });
    }
    // The last records of a batch: run() lets writers in once the next batch has started.
    if (batch.open > 0) this.wake();
  }

  /** Fatal: stop accepting, reject every wait. Records not yet terminal stay pending, never durable. */
  private fail(error: unknown): void {
    if (this.stateValue === 'failed') return;
    this.stateValue = 'failed';
    this.fatal = error;
    this.disarm();
    // A failed sink never writes again: nothing for the exit net to flush.
    this.releaseExitHold();
    const refused = new SinkFailedError(this.name, error);
    for (const w of this.waiters.splice(0)) {
      w.detach?.();
      w.reject(refused);
    }
    for (const b of this.barriers) b.reject(refused);
    this.barriers.clear();
    this.emit('error', { sink: this.name, error });
  }

  // ---------------------------------------------------------------- timer

  /** Arms the one flush timer for the earliest deadline (oldest record's age, or idle). */
  private arm(): void {
    if (this.stateValue === 'failed' || this.bufferedCount === 0) {
      this.disarm();
      return;
    }
    let at: number;
    if (this.slotWaitSince !== undefined) {
      // A batch is due but waits for a slot or a busy key: their release pumps. Only records that
      // could go now but are not yet due need the timer.
      if (this.keyWaitAt === undefined || this.inflight.size >= this.o.concurrency) {
        this.disarm();
        return;
      }
      at = this.keyWaitAt;
    } else {
      at = this.buffer[this.head]!.acceptedAt + this.o.maxAgeMs;
      if (this.o.idleMs > 0) at = Math.min(at, this.lastWriteAt + this.o.idleMs);
    }
    // An armed timer that fires no later is kept: a write never moves a deadline earlier.
    if (this.timer !== undefined && this.timerAt <= at) return;
    this.disarm();
    this.timerAt = at;
    this.timer = this.o.clock.setTimeout(
      () => {
        this.timer = undefined;
        this.timerAt = Number.POSITIVE_INFINITY;
        this.pump();
      },
      Math.max(0, at - this.o.clock.now()),
    );
  }

  private disarm(): void {
    if (this.timer !== undefined) this.o.clock.clearTimeout(this.timer);
    this.timer = undefined;
    this.timerAt = Number.POSITIVE_INFINITY;
  }

  // ---------------------------------------------------------------- requests

  /** Flushes everything accepted so far (`manual`); resolves when all of it is terminal. */
  flush(): Promise<void> {
    return this.flushWhere(() => true, 'manual');
  }

  /**
   * Flushes the records whose metadata matches (`revoke`: a source is giving up those partitions)
   * and resolves when they are terminal.
   */
  revoke(match: (meta: RecordMeta | undefined) => boolean): Promise<void> {
    return this.flushWhere(match, 'revoke');
  }

  private flushWhere(match: (meta: RecordMeta | undefined) => boolean, reason: FlushReason): Promise<void> {
    if (this.stateValue === 'failed') return Promise.reject(new SinkFailedError(this.name, this.fatal));
    const barrier = this.barrierOver(match);
    this.force(match, reason);
    return barrier;
  }

  /** Marks the matching buffered records to leave now, and starts what a slot allows. */
  private force(match: (meta: RecordMeta | undefined) => boolean, reason: FlushReason): void {
    for (let i = this.head; i < this.buffer.length; i++) {
      const e = this.buffer[i]!;
      if (e.forced === undefined && match(e.meta)) {
        e.forced = reason;
        this.forcedCount++;
      }
    }
    if (this.forcedCount > 0) this.forcedReason = reason;
    this.pump();
  }

  /**
   * The event loop is about to empty while this sink holds buffered records (see exit-net.ts):
   * they leave now (`shutdown`), and the write keeps the process alive until they are terminal.
   * @internal
   */
  flushBeforeExit(): void {
    if (this.stateValue === 'failed' || this.bufferedCount === 0) return;
    this.force(() => true, 'shutdown');
  }

  private releaseExitHold(): void {
    if (!this.holdingExit) return;
    this.holdingExit = false;
    releaseExit(this);
  }

  /** A promise that resolves when every pending record matching `match` is terminal. */
  private barrierOver(match: (meta: RecordMeta | undefined) => boolean): Promise<void> {
    return new Promise<void>((resolve, reject) => {
      const barrier: Barrier = { remaining: 0, resolve, reject };
      const hold = (e: Entry<T>) => {
        if (!match(e.meta)) return;
        barrier.remaining++;
        (e.barriers ??= []).push(barrier);
      };
      for (let i = this.head; i < this.buffer.length; i++) hold(this.buffer[i]!);
      for (const b of this.inflight) for (const e of b.entries) if (!e.done) hold(e);
      if (barrier.remaining === 0) resolve();
      else this.barriers.add(barrier);
    });
  }

  /** Resolves when nothing is pending (buffered or in flight). */
  drained(): Promise<void> {
    return this.barrierOver(() => true);
  }

  /**
   * Stops accepting, flushes everything (`shutdown`) and resolves when every accepted record is
   * terminal and the adapter is closed. Past `timeoutMs` it rejects with `SPILLWAY_SHUTDOWN_TIMEOUT`
   * naming how many records are pending and in which state (they keep going in the background).
   *
   * Writes already waiting for room when close() begins are not refused: their records join the
   * final flush (so the pending bound is overshot by at most the number of waiting writers) and
   * their promises resolve. Writes that arrive later reject, or park (`options.laterWrites`).
   */
  close(options: CloseOptions = {}): Promise<void> {
    let timeoutMs: number;
    let park: boolean;
    try {
      timeoutMs = numberOption('timeoutMs', options.timeoutMs, 30_000, { min: 0, exclusiveMin: true });
      const later = options.laterWrites ?? 'reject';
      if (later !== 'reject' && later !== 'park')
        throw invalidOption('laterWrites', '"reject" or "park"', options.laterWrites);
      park = later === 'park';
    } catch (error) {
      return Promise.reject(error);
    }
    if (park) this.parkLaterWrites = true;
    if (this.closing) return this.closing;
    const wasFailed = this.stateValue === 'failed';
    if (!wasFailed) this.stateValue = 'closing';
    // Writers already waiting were promised room: their records join the final flush.
    for (const w of this.waiters.splice(0)) this.admit(w);
    this.closing = (async () => {
      if (wasFailed) throw new SinkFailedError(this.name, this.fatal);
      const all = this.flushWhere(() => true, 'shutdown');
      let timer: unknown;
      const deadline = new Promise<never>((_, reject) => {
        timer = this.o.clock.setTimeout(
          () => reject(new ShutdownTimeoutError(`close() of sink "${this.name}"`, timeoutMs, this.pending())),
          timeoutMs,
        );
      });
      try {
        await Promise.race([all, deadline]);
      } finally {
        this.o.clock.clearTimeout(timer);
      }
      this.disarm();
      await this.adapter.close?.();
      await this.o.deadLetter?.close?.();
      this.stateValue = 'closed';
      this.releaseExitHold();
    })();
    this.closedPromise.catch(() => {});
    this.closing.then(
      () => this.closedSettle?.resolve(),
      (e) => this.closedSettle?.reject(e),
    );
    return this.closing;
  }

  /** Resolves when close() has finished (whoever called it); rejects as close() does. */
  closed(): Promise<void> {
    return this.closedPromise;
  }

  private closedSettle: { resolve(): void; reject(e: unknown): void } | undefined;
  private readonly closedPromise = new Promise<void>((resolve, reject) => {
    this.closedSettle = { resolve, reject };
  });

  /** Records not yet terminal, by state. */
  pending(): PendingCounts {
    let retrying = 0;
    for (const b of this.inflight) retrying += b.retrying;
    return { buffered: this.bufferedCount, inFlight: this.inflightRecords, retrying };
  }

  // ---------------------------------------------------------------- events & metrics

  on<E extends SinkEventName>(event: E, listener: (payload: SinkEvents[E]) => void): this {
    this.events.on(event, listener as (p: unknown) => void);
    return this;
  }

  off<E extends SinkEventName>(event: E, listener: (payload: SinkEvents[E]) => void): this {
    this.events.off(event, listener as (p: unknown) => void);
    return this;
  }

  once<E extends SinkEventName>(event: E, listener: (payload: SinkEvents[E]) => void): this {
    this.events.once(event, listener as (p: unknown) => void);
    return this;
  }

  private emit<E extends SinkEventName>(event: E, payload: SinkEvents[E]): void {
    // 'error' with no listener must not throw: the failure is in state and in every rejection.
    if (event === 'error' && this.events.listenerCount('error') === 0) return;
    this.events.emit(event, payload);
  }

  /** The gauges and counters of `snapshot()` without the distributions: cheap enough per record. */
  counters(): SinkCounters {
    const now = this.o.clock.now();
    return {
      name: this.name,
      kind: this.kind,
      state: this.stateValue,
      bufferedRecords: this.bufferedCount,
      bufferedBytes: this.bufferedBytes,
      oldestAgeMs: this.bufferedCount === 0 ? 0 : now - this.buffer[this.head]!.acceptedAt,
      inFlightBatches: this.inflight.size,
      inFlightRecords: this.inflightRecords,
      pendingRecords: this.pendingRecords,
      pendingBytes: this.pendingBytes,
      waitingWriters: this.waiters.length,
      accepted: this.accepted,
      written: this.written,
      deadLettered: this.deadLettered,
      retries: this.retries,
      batches: this.batches,
      flushes: { ...this.flushes },
      backpressureWaits: this.backpressureWaits,
      backpressureWaitMsTotal: this.backpressureWaitMsTotal,
    };
  }

  /** Gauges, counters and distributions (summarising the histograms costs about a millisecond). */
  snapshot(): SinkSnapshot {
    const h = this.h;
    return {
      ...this.counters(),
      batchRecords: h.batchRecords.summary(),
      batchBytes: h.batchBytes.summary(),
      flushDurationMs: h.flushDurationMs.summary(),
      acceptToDurableMs: h.acceptToDurableMs.summary(),
      eventToDurableMs: h.eventToDurableMs.summary(),
      slotWaitMs: h.slotWaitMs.summary(),
      backpressureWaitMs: h.backpressureWaitMs.summary(),
    };
  }
}

function sumBytes<T>(entries: readonly Entry<T>[]): number {
  let n = 0;
  for (const e of entries) n += e.bytes;
  return n;
}
