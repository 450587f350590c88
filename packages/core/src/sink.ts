/**
 * The sink, read top-down: a record is admitted (engine/admission.ts), waits in the buffer
 * (engine/buffer.ts) until the scheduler starts its batch (engine/scheduler.ts), is delivered with
 * the retry / split / fatal policy (engine/delivery.ts) or routed to the dead-letter target
 * (engine/dead-letter-routing.ts), and is settled exactly once (engine/settlement.ts), which
 * counts it (engine/stats.ts) and releases whoever waits for it. This file holds the lifecycle
 * (open → closing → closed, or failed) and the public API.
 */

import { Admission } from './engine/admission.js';
import { RecordBuffer } from './engine/buffer.js';
import { DeadLetterRouter } from './engine/dead-letter-routing.js';
import { Delivery } from './engine/delivery.js';
import type { Barrier } from './engine/records.js';
import { Scheduler } from './engine/scheduler.js';
import { Settlement } from './engine/settlement.js';
import { SinkStats } from './engine/stats.js';
import {
  type PendingCounts,
  ShutdownTimeoutError,
  SinkClosedError,
  SinkFailedError,
  type SpillwayError,
} from './errors.js';
import { type ExitFlushable, ExitHold, reportLossAtExit } from './exit-net.js';
import { invalidOption, numberOption } from './option-checks.js';
import {
  type CloseOptions,
  type ResolvedOptions,
  resolveOptions,
  type SinkOptions,
  type WriteOptions,
} from './options.js';
import { ProgressTracker } from './progress.js';
import { TypedEmitter } from './typed-emitter.js';
import type {
  FlushReason,
  RecordMeta,
  SinkAdapter,
  SinkCounters,
  SinkEventName,
  SinkEvents,
  SinkSnapshot,
  SinkState,
} from './types.js';

/** What a write gets after a `laterWrites: 'park'` close: a promise that never settles. */
const PARKED = new Promise<void>(() => {});
const PARK = Symbol('park');
const ALL = () => true;

/**
 * A buffered sink: accepts records one at a time and writes them to its adapter in batches that
 * leave by size, bytes, age, idle time, or on request. Every accepted record ends exactly once as
 * durable or dead-lettered.
 *
 * While it holds records that are not terminal, its timers (flush, retry back-off) keep the
 * process alive, so a program whose input ends without close() still flushes at `maxAgeMs` /
 * `idleMs` and exits once they are durable or dead-lettered; an idle sink holds no timer.
 */
export class Sink<T> implements ExitFlushable {
  readonly name: string;
  readonly kind: string;
  /** Commit points per source partition, over records that carried an offset. */
  readonly progress = new ProgressTracker();

  private readonly adapter: SinkAdapter<T>;
  private readonly o: ResolvedOptions<T>;
  private readonly events = new TypedEmitter<SinkEvents>();
  private readonly stats = new SinkStats();
  private readonly buffer: RecordBuffer<T>;
  private readonly scheduler: Scheduler<T>;
  private readonly settlement: Settlement<T>;
  private readonly delivery: Delivery<T>;
  private readonly admission: Admission<T>;

  private stateValue: SinkState = 'open';
  private fatal: unknown;
  private closing: Promise<void> | undefined;
  /** Set by a `laterWrites: 'park'` close: later writes park instead of rejecting. */
  private parkLaterWrites = false;
  /** Holds the process open while records are pending (see exit-net.ts). */
  private readonly exitHold = new ExitHold(this);

  constructor(adapter: SinkAdapter<T>, options?: SinkOptions<T>) {
    if (!adapter || typeof adapter.write !== 'function' || typeof adapter.classify !== 'function') {
      throw invalidOption('adapter', 'a SinkAdapter with write() and classify()', adapter);
    }
    this.adapter = adapter;
    this.kind = adapter.kind;
    const o = resolveOptions(options, adapter.kind);
    this.o = o;
    this.name = o.name;
    const { name, events, stats } = this;
    const failed = () => this.stateValue === 'failed';
    const fail = (error: unknown) => this.fail(error);
    const settle = this.settle;
    this.buffer = new RecordBuffer<T>(o.clock.now());
    this.scheduler = new Scheduler(name, o, this.buffer, stats, events, {
      deliver: (batch, reason) => this.delivery.deliver(batch, reason, undefined),
      fail,
      failed,
      waitingWriters: () => this.admission.waiting,
      wake: () => this.admission.wake(),
    });
    this.settlement = new Settlement(name, o.clock, this.progress, stats, events, {
      holdPending: (match, barrier) =>
        this.buffer.holdBarrier(match, barrier) + this.scheduler.holdBarrier(match, barrier),
      retire: (records, bytes) => {
        this.scheduler.retire(records, bytes);
        this.admission.released(records);
      },
      roomFreed: () => this.admission.wake(),
      idle: () => this.exitHold.release(),
      pendingRecords: () => this.admission.pendingRecords,
    });
    const deadLetters = new DeadLetterRouter(name, o.deadLetter, o.clock, events, { settle, fail });
    this.delivery = new Delivery(name, adapter, o, stats, events, deadLetters, { settle, fail, failed });
    this.admission = new Admission(
      name,
      adapter,
      o,
      this.buffer,
      this.scheduler,
      this.settlement,
      stats,
      events,
      () => this.exitHold.hold(),
      () => this.stateValue === 'open',
    );
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
    if (this.stateValue === 'open') return this.admission.write(record, meta, options?.signal, undefined);
    const refused = this.refusal();
    if (refused === PARK) return PARKED;
    if (refused) return Promise.reject(refused);
    return this.admission.write(record, meta, options?.signal, undefined);
  }

  /**
   * Synchronous fast path for hot loops: accepts and returns true when there is room, returns
   * false when the caller must wait (then use `write()` or `drained()`). Throws when closed, or
   * returns false when the close parks later writes (see `CloseOptions.laterWrites`).
   */
  tryWrite(record: T, meta?: RecordMeta): boolean {
    if (this.stateValue === 'open') return this.admission.tryWrite(record, meta);
    const refused = this.refusal();
    if (refused === PARK) return false;
    if (refused) throw refused;
    return this.admission.tryWrite(record, meta);
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
    return this.admission.tryWriteMany(records, metas);
  }

  /** Accepts a record and resolves once it is terminal, with its outcome. */
  async writeDurable(
    record: T,
    meta?: RecordMeta,
    options?: WriteOptions,
  ): Promise<'durable' | 'dead-lettered'> {
    const refused = this.refusal();
    if (refused === PARK) return PARKED as Promise<never>;
    if (refused) throw refused;
    let outcome: 'durable' | 'dead-lettered' = 'durable';
    let barrier: Barrier | undefined;
    const done = new Promise<void>((resolve, reject) => {
      barrier = { remaining: 1, resolve, reject, onOutcome: (o) => (outcome = o) };
    });
    await this.admission.write(record, meta, options?.signal, barrier);
    await done;
    return outcome;
  }

  private refusal(): SpillwayError | typeof PARK | undefined {
    if (this.stateValue === 'failed') return new SinkFailedError(this.name, this.fatal);
    if (this.stateValue !== 'open') return this.parkLaterWrites ? PARK : new SinkClosedError(this.name);
    return undefined;
  }

  // ---------------------------------------------------------------- requests

  /** Flushes everything accepted so far (`manual`); resolves when all of it is terminal. */
  flush(): Promise<void> {
    return this.flushWhere(ALL, 'manual');
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
    const barrier = this.settlement.barrierOver(match);
    this.buffer.force(match, reason);
    this.scheduler.pump();
    return barrier;
  }

  /** Resolves when nothing is pending (buffered or in flight). */
  drained(): Promise<void> {
    return this.settlement.barrierOver(ALL);
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
    this.admission.admitAll();
    this.closing = (async () => {
      if (wasFailed) throw new SinkFailedError(this.name, this.fatal);
      const all = this.flushWhere(ALL, 'shutdown');
      const clock = this.o.clock;
      let timer: unknown;
      const deadline = new Promise<never>((_, reject) => {
        timer = clock.setTimeout(
          () => reject(new ShutdownTimeoutError(`close() of sink "${this.name}"`, timeoutMs, this.pending())),
          timeoutMs,
        );
      });
      try {
        await Promise.race([all, deadline]);
      } finally {
        clock.clearTimeout(timer);
      }
      this.scheduler.disarm();
      await this.adapter.close?.();
      await this.o.deadLetter?.close?.();
      this.stateValue = 'closed';
      this.exitHold.release();
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
    return {
      buffered: this.buffer.count,
      inFlight: this.scheduler.inflightRecords,
      retrying: this.scheduler.retrying(),
    };
  }

  // ---------------------------------------------------------------- failure and exit

  /** Fatal: stop accepting, reject every wait. Records not yet terminal stay pending, never durable. */
  private fail(error: unknown): void {
    if (this.stateValue === 'failed') return;
    this.stateValue = 'failed';
    this.fatal = error;
    this.scheduler.disarm();
    // A failed sink never writes again: nothing for the exit net to flush.
    this.exitHold.release();
    const refused = new SinkFailedError(this.name, error);
    this.admission.rejectAll(refused);
    this.settlement.rejectAll(refused);
    const failureCode = refused.driverCode ?? refused.code;
    reportLossAtExit({ name: this.name, failureCode, unwritten: () => this.unwritten() });
    this.events.emit('error', { sink: this.name, error });
  }

  private unwritten(): number {
    const p = this.pending();
    return p.buffered + p.inFlight;
  }

  private readonly settle: Settlement<T>['settle'] = (batch, part, outcome) =>
    this.settlement.settle(batch, part, outcome);

  /**
   * The event loop is about to empty while this sink holds buffered records (see exit-net.ts):
   * they leave now (`shutdown`), and the write keeps the process alive until they are terminal.
   * @internal
   */
  flushBeforeExit(): void {
    if (this.stateValue === 'failed' || this.buffer.count === 0) return;
    this.buffer.force(ALL, 'shutdown');
    this.scheduler.pump();
  }

  // ---------------------------------------------------------------- events & metrics

  on<E extends SinkEventName>(event: E, listener: (payload: SinkEvents[E]) => void): this {
    this.events.on(event, listener);
    return this;
  }

  off<E extends SinkEventName>(event: E, listener: (payload: SinkEvents[E]) => void): this {
    this.events.off(event, listener);
    return this;
  }

  once<E extends SinkEventName>(event: E, listener: (payload: SinkEvents[E]) => void): this {
    this.events.once(event, listener);
    return this;
  }

  /** The gauges and counters of `snapshot()` without the distributions: cheap enough per record. */
  counters(): SinkCounters {
    const s = this.stats;
    const oldest = this.buffer.oldestAt();
    return {
      name: this.name,
      kind: this.kind,
      state: this.stateValue,
      bufferedRecords: this.buffer.count,
      bufferedBytes: this.buffer.bytes,
      oldestAgeMs: oldest === undefined ? 0 : this.o.clock.now() - oldest,
      inFlightBatches: this.scheduler.inflight.size,
      inFlightRecords: this.scheduler.inflightRecords,
      pendingRecords: this.admission.pendingRecords,
      pendingBytes: this.admission.pendingBytes,
      waitingWriters: this.admission.waiting,
      accepted: s.accepted,
      written: s.written,
      deadLettered: s.deadLettered,
      retries: s.retries,
      batches: s.batches,
      flushes: { ...s.flushes },
      backpressureWaits: s.backpressureWaits,
      backpressureWaitMsTotal: s.backpressureWaitMsTotal,
    };
  }

  /** Gauges, counters and distributions (summarising the histograms costs about a millisecond). */
  snapshot(): SinkSnapshot {
    return { ...this.counters(), ...this.stats.distributions() };
  }
}
