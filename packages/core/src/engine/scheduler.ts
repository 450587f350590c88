/**
 * The scheduler: decides when buffered records leave and starts their batches. It owns the flush
 * timer (age / idle deadlines), the in-flight slots (`concurrency`) and the key locks (two batches
 * of one ordering key are never in flight together).
 */
import type { Clock } from '../clock.js';
import type { ResolvedOptions } from '../options.js';
import type { TypedEmitter } from '../typed-emitter.js';
import type { FlushReason, RecordMeta, SinkEvents } from '../types.js';
import type { RecordBuffer } from './buffer.js';
import type { Barrier, Columns, InFlight } from './records.js';
import type { SinkStats } from './stats.js';

/** What the scheduler needs from the rest of the sink. */
export interface SchedulerHooks<T> {
  /** Writes a started batch to the store; resolves when every record of it is terminal. */
  deliver(batch: InFlight<T>, reason: FlushReason): Promise<void>;
  /** A bug in an adapter hook: the sink fails. */
  fail(error: unknown): void;
  failed(): boolean;
  waitingWriters(): number;
  /** Lets waiting writers in while there is room. */
  wake(): void;
}

export class Scheduler<T> {
  readonly inflight = new Set<InFlight<T>>();
  inflightRecords = 0;
  inflightBytes = 0;
  private readonly lockedKeys = new Map<string, number>();
  private nextBatchId = 1;
  /** When a flush first became due without a free slot (or with every due key busy). */
  private slotWaitSince: number | undefined;
  /** Age deadline of the oldest record that could go but is not due yet (see RecordBuffer.take()). */
  private keyWaitAt: number | undefined;
  private timer: unknown;
  private timerAt = Number.POSITIVE_INFINITY;
  private readonly clock: Clock;
  private readonly fire = () => {
    this.timer = undefined;
    this.timerAt = Number.POSITIVE_INFINITY;
    this.pump();
  };

  constructor(
    private readonly name: string,
    private readonly o: ResolvedOptions<T>,
    private readonly buffer: RecordBuffer<T>,
    private readonly stats: SinkStats,
    private readonly events: TypedEmitter<SinkEvents>,
    private readonly hooks: SchedulerHooks<T>,
  ) {
    this.clock = o.clock;
  }

  get timerArmed(): boolean {
    return this.timer !== undefined;
  }

  /** A record was accepted: a full buffer leaves now; otherwise its deadline needs a timer. */
  accepted(): void {
    if (this.buffer.count >= this.o.maxRecords || this.buffer.bytes >= this.o.maxBytes) {
      // While every slot is busy and the wait for one is already being timed, a pump would only
      // find that again: the slot's release pumps.
      if (this.slotWaitSince === undefined || this.inflight.size < this.o.concurrency) this.pump();
    } else if (this.timer === undefined) this.arm();
  }

  /** Starts every batch that is due and has a free slot, then arms the timer for the next deadline. */
  pump(): void {
    if (this.hooks.failed()) return;
    const now = this.clock.now();
    this.keyWaitAt = undefined;
    for (;;) {
      const reason = this.buffer.dueReason(now, this.o, this.o.idleMs, this.hooks.waitingWriters() > 0);
      if (reason === undefined) {
        this.slotWaitSince = undefined;
        break;
      }
      if (this.inflight.size >= this.o.concurrency) {
        this.slotWaitSince ??= now;
        break;
      }
      const taken = this.buffer.take(reason, now, this.o, this.lockedKeys);
      if (taken.batch === undefined) {
        // The due records' keys have batches in flight (their completion pumps again), and what
        // could go now is not itself due (`keyWaitAt` arms the timer for it).
        this.keyWaitAt = taken.waitUntil;
        this.slotWaitSince ??= now;
        break;
      }
      this.start(taken.batch, taken.reason, now);
    }
    this.arm();
  }

  private start(taken: Columns<T>, reason: FlushReason, now: number): void {
    const id = this.nextBatchId++;
    const { records, bytes, keys } = taken;
    const count = records.length;
    const batch: InFlight<T> = {
      id,
      records,
      metas: taken.metas,
      prepared: taken.prepared,
      sizes: taken.sizes,
      times: taken.times,
      keys,
      barriers: taken.barriers,
      bytes,
      open: count,
      done: undefined,
      retrying: 0,
    };
    if (keys !== undefined) {
      // One lock per run of records with the same key: a Map update per run, not per record.
      const locked = this.lockedKeys;
      for (let r = 0; r < keys.keys.length; r++) {
        const key = keys.keys[r]!;
        locked.set(key, (locked.get(key) ?? 0) + keys.counts[r]!);
      }
    }
    this.inflight.add(batch);
    this.inflightRecords += count;
    this.inflightBytes += bytes;
    const s = this.stats;
    s.batches++;
    s.flushes[reason]++;
    s.batchRecords.record(count);
    s.batchBytes.record(bytes);
    const slotWaitMs = this.slotWaitSince === undefined ? 0 : now - this.slotWaitSince;
    this.slotWaitSince = undefined;
    s.slotWaitMs.record(slotWaitMs);
    this.events.emit('flush', {
      sink: this.name,
      batchId: id,
      reason,
      records: count,
      bytes,
      slotWaitMs,
    });
    void this.run(batch, reason);
  }

  private async run(batch: InFlight<T>, reason: FlushReason): Promise<void> {
    try {
      await this.hooks.deliver(batch, reason);
    } catch (error) {
      // Delivery handles store errors itself; anything reaching here is a bug in an adapter hook.
      this.hooks.fail(error);
    } finally {
      this.inflight.delete(batch);
      const keys = batch.keys;
      if (keys !== undefined) {
        const locked = this.lockedKeys;
        for (let r = 0; r < keys.keys.length; r++) {
          const key = keys.keys[r]!;
          const n = (locked.get(key) ?? keys.counts[r]!) - keys.counts[r]!;
          if (n <= 0) locked.delete(key);
          else locked.set(key, n);
        }
      }
      // The next batch goes first: its write starts (and, where the adapter sends right away,
      // reaches the store) before waiting writers refill the buffer. When one did start, writers
      // are let in on the next turn of the event loop, after the connection work the adapter
      // queued for it (a pool checkout, a socket write); otherwise right away.
      const started = this.stats.batches;
      this.pump();
      if (this.stats.batches === started || this.hooks.waitingWriters() === 0) this.hooks.wake();
      else setImmediate(this.hooks.wake);
    }
  }

  /** Records of a batch became terminal: they no longer count as in flight. */
  retire(records: number, bytes: number): void {
    this.inflightRecords -= records;
    this.inflightBytes -= bytes;
  }

  /**
   * Adds `barrier` to every record in flight, not yet terminal, whose metadata matches; returns
   * how many it did.
   */
  holdBarrier(match: (meta: RecordMeta | undefined) => boolean, barrier: Barrier): number {
    let held = 0;
    for (const b of this.inflight) {
      if (b.open === 0) continue;
      for (let i = 0; i < b.records.length; i++) {
        if (b.done?.[i] === 1 || !match(b.metas?.[i])) continue;
        const column = (b.barriers ??= new Array<Barrier[] | undefined>(b.records.length).fill(undefined));
        const list = column[i];
        if (list === undefined) column[i] = [barrier];
        else list.push(barrier);
        held++;
      }
    }
    return held;
  }

  /** Records waiting out a retry back-off, over every batch in flight. */
  retrying(): number {
    let n = 0;
    for (const b of this.inflight) n += b.retrying;
    return n;
  }

  /**
   * Arms the one flush timer for the earliest deadline (oldest record's age, or idle). The timer
   * exists only while records are buffered; with the system clock it keeps the process alive.
   */
  arm(): void {
    if (this.hooks.failed() || this.buffer.count === 0) {
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
      at = this.buffer.oldestAt()! + this.o.maxAgeMs;
      if (this.o.idleMs > 0) at = Math.min(at, this.buffer.lastWriteAt + this.o.idleMs);
    }
    // An armed timer that fires no later is kept: a write never moves a deadline earlier.
    if (this.timer !== undefined && this.timerAt <= at) return;
    this.disarm();
    this.timerAt = at;
    this.timer = this.clock.setTimeout(this.fire, Math.max(0, at - this.clock.now()));
  }

  disarm(): void {
    if (this.timer !== undefined) this.clock.clearTimeout(this.timer);
    this.timer = undefined;
    this.timerAt = Number.POSITIVE_INFINITY;
  }
}
