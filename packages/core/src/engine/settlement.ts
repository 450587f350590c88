/**
 * Settlement: a record becomes terminal (durable or dead-lettered) exactly once. Counting it,
 * recording its latency, advancing the progress of its source partition, and releasing the waits
 * (barriers) of flush(), revoke(), drained() and writeDurable() that it held.
 */
import type { Clock } from '../clock.js';
import { type ProgressTracker, partitionKey } from '../progress.js';
import type { TypedEmitter } from '../typed-emitter.js';
import type { RecordMeta, SinkEvents } from '../types.js';
import type { Barrier, Entry, InFlight, Outcome } from './records.js';
import { LATENCY_STEPS_PER_MS, type SinkStats } from './stats.js';

export interface SettlementHooks<T> {
  /** Records the barriers may wait for: buffered ones, then unsettled ones in flight. */
  forEachPending(fn: (entry: Entry<T>) => void): void;
  /** Settled records no longer count as in flight. */
  retire(records: number, bytes: number): void;
  /** Called after records settled while their batch still has open ones (room for writers). */
  roomFreed(): void;
  /** Called when nothing is pending any more. */
  idle(): void;
  pendingRecords(): number;
}

export class Settlement<T> {
  private readonly barriers = new Set<Barrier>();

  constructor(
    private readonly name: string,
    private readonly clock: Clock,
    private readonly progress: ProgressTracker,
    private readonly stats: SinkStats,
    private readonly events: TypedEmitter<SinkEvents>,
    private readonly hooks: SettlementHooks<T>,
  ) {}

  /** Starts tracking a record's source offset (the progress tracker's commit point waits for it). */
  track(meta: RecordMeta | undefined): void {
    if (meta?.offset !== undefined && meta.externalProgress !== true)
      this.progress.track(partitionKey(meta.topic, meta.partition), meta.offset);
  }

  /** A barrier that one record (a writeDurable()) holds from its accept on. */
  hold(barrier: Barrier): void {
    this.barriers.add(barrier);
  }

  /** Marks records terminal: metrics, progress, barriers, and room for waiting writers. */
  settle(batch: InFlight<T>, entries: Entry<T>[], outcome: Outcome): void {
    const now = this.clock.now();
    const wall = this.clock.wallNow();
    const wantEvent = this.events.listenerCount('settled') > 0;
    const latencies: number[] = wantEvent ? new Array(entries.length) : [];
    const h = this.stats;
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
          if (runCount > 0) h.acceptToDurableMs.recordMany(runValue, runCount);
          runValue = v;
          runCount = 1;
        }
        const eventTime = e.meta?.eventTime;
        if (eventTime !== undefined) {
          // Source timestamps are in whole milliseconds: neighbours mostly share one.
          const ev = wall - eventTime;
          if (ev === eventValue) eventCount++;
          else {
            if (eventCount > 0) h.eventToDurableMs.recordMany(eventValue, eventCount);
            eventValue = ev;
            eventCount = 1;
          }
        }
      }
      if (e.meta?.offset !== undefined && e.meta.externalProgress !== true)
        this.progress.complete(partitionKey(e.meta.topic, e.meta.partition), e.meta.offset);
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
    if (runCount > 0) h.acceptToDurableMs.recordMany(runValue, runCount);
    if (eventCount > 0) h.eventToDurableMs.recordMany(eventValue, eventCount);
    if (durable) h.written += entries.length;
    else h.deadLettered += entries.length;
    batch.open -= entries.length;
    this.hooks.retire(entries.length, bytes);
    if (this.hooks.pendingRecords() === 0) this.hooks.idle();
    if (wantEvent) {
      this.events.emit('settled', {
        sink: this.name,
        outcome,
        metas: entries.map((e) => e.meta),
        latenciesMs: latencies,
      });
    }
    // The last records of a batch: the scheduler lets writers in once the next batch has started.
    if (batch.open > 0) this.hooks.roomFreed();
  }

  /** A promise that resolves when every pending record matching `match` is terminal. */
  barrierOver(match: (meta: RecordMeta | undefined) => boolean): Promise<void> {
    return new Promise<void>((resolve, reject) => {
      const barrier: Barrier = { remaining: 0, resolve, reject };
      this.hooks.forEachPending((e) => {
        if (!match(e.meta)) return;
        barrier.remaining++;
        (e.barriers ??= []).push(barrier);
      });
      if (barrier.remaining === 0) resolve();
      else this.barriers.add(barrier);
    });
  }

  /** The sink failed: every wait rejects with `error`. */
  rejectAll(error: unknown): void {
    for (const b of this.barriers) b.reject(error);
    this.barriers.clear();
  }
}
