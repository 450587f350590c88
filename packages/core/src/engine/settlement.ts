/**
 * Settlement: a record becomes terminal (durable or dead-lettered) exactly once. Counting it,
 * recording its latency, advancing the progress of its source partition, and releasing the waits
 * (barriers) of flush(), revoke(), drained() and writeDurable() that it held.
 */
import type { Clock } from '../clock.js';
import { type ProgressTracker, partitionKey } from '../progress.js';
import type { TypedEmitter } from '../typed-emitter.js';
import type { RecordMeta, SinkEvents } from '../types.js';
import {
  type Barrier,
  type InFlight,
  noMetasColumn,
  type Outcome,
  type Part,
  partBytes,
  partLength,
  pick,
} from './records.js';
import { LATENCY_STEPS_PER_MS, type SinkStats } from './stats.js';

export interface SettlementHooks {
  /**
   * Adds `barrier` to every pending record (buffered, or in flight and not yet terminal) whose
   * metadata matches; returns how many it did.
   */
  holdPending(match: (meta: RecordMeta | undefined) => boolean, barrier: Barrier): number;
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
    private readonly hooks: SettlementHooks,
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

  /**
   * Marks the records of `batch` that `part` names (all of them when undefined) terminal:
   * metrics, progress, barriers, and room for waiting writers.
   */
  settle(batch: InFlight<T>, part: Part, outcome: Outcome): void {
    const now = this.clock.now();
    const n = partLength(batch, part);
    const wantEvent = this.events.listenerCount('settled') > 0;
    const { times, metas, barriers } = batch;
    const h = this.stats;
    const durable = outcome === 'durable';
    // Consecutive records accepted within one histogram step share a value: record them as a
    // run, which keeps the per-record cost of the latency distribution near zero. Records
    // stamped with one clock reading (see Admission.acceptNow()) need not even be rounded.
    const at = part === undefined ? times : pick(times, part);
    if (durable) {
      let lastAt = Number.NaN;
      let runValue = Number.NaN;
      let runCount = 0;
      for (let k = 0; k < n; k++) {
        const t = at[k]!;
        if (t === lastAt) {
          runCount++;
          continue;
        }
        lastAt = t;
        const v = Math.round((now - t) * LATENCY_STEPS_PER_MS) / LATENCY_STEPS_PER_MS;
        if (v === runValue) runCount++;
        else {
          if (runCount > 0) h.acceptToDurableMs.recordMany(runValue, runCount);
          runValue = v;
          runCount = 1;
        }
      }
      if (runCount > 0) h.acceptToDurableMs.recordMany(runValue, runCount);
    }
    if (metas !== undefined) this.settleMetas(metas, part, n, durable);
    if (barriers !== undefined) {
      for (let k = 0; k < n; k++) {
        const i = part === undefined ? k : part[k]!;
        const held = barriers[i];
        if (held === undefined) continue;
        barriers[i] = undefined;
        for (const b of held) {
          b.onOutcome?.(outcome);
          if (--b.remaining === 0) {
            this.barriers.delete(b);
            b.resolve();
          }
        }
      }
    }
    if (durable) h.written += n;
    else h.deadLettered += n;
    batch.open -= n;
    this.hooks.retire(n, partBytes(batch, part));
    if (this.hooks.pendingRecords() === 0) this.hooks.idle();
    if (wantEvent) {
      this.events.emit(
        'settled',
        settledEvent(this.name, outcome, metas === undefined ? noMetasColumn(n) : pick(metas, part), at, now),
      );
    }
    if (part !== undefined) this.release(batch, part);
    // The last records of a batch: the scheduler lets writers in once the next batch has started.
    if (batch.open > 0) this.hooks.roomFreed();
  }

  /**
   * Part of a batch ended before the rest (a partial write, a split): marks those records done and
   * lets go of them while the rest is still being written. (A whole batch is let go of with the
   * batch itself.)
   */
  private release(batch: InFlight<T>, part: readonly number[]): void {
    const done = (batch.done ??= new Uint8Array(batch.records.length));
    const records = batch.records as (T | undefined)[];
    const metas = batch.metas as (RecordMeta | undefined)[] | undefined;
    const prepared = batch.prepared as unknown[] | undefined;
    for (const i of part) {
      done[i] = 1;
      records[i] = undefined;
      if (metas !== undefined) metas[i] = undefined;
      if (prepared !== undefined) prepared[i] = undefined;
    }
  }

  /** Event-time latency and source progress of settled records that carry metadata. */
  private settleMetas(
    metas: readonly (RecordMeta | undefined)[],
    part: Part,
    n: number,
    durable: boolean,
  ): void {
    const wall = this.clock.wallNow();
    const h = this.stats;
    let eventValue = Number.NaN;
    let eventCount = 0;
    for (let k = 0; k < n; k++) {
      const meta = metas[part === undefined ? k : part[k]!];
      if (meta === undefined) continue;
      const eventTime = meta.eventTime;
      if (durable && eventTime !== undefined) {
        // Source timestamps are in whole milliseconds: neighbours mostly share one.
        const ev = wall - eventTime;
        if (ev === eventValue) eventCount++;
        else {
          if (eventCount > 0) h.eventToDurableMs.recordMany(eventValue, eventCount);
          eventValue = ev;
          eventCount = 1;
        }
      }
      if (meta.offset !== undefined && meta.externalProgress !== true)
        this.progress.complete(partitionKey(meta.topic, meta.partition), meta.offset);
    }
    if (eventCount > 0) h.eventToDurableMs.recordMany(eventValue, eventCount);
  }

  /** A promise that resolves when every pending record matching `match` is terminal. */
  barrierOver(match: (meta: RecordMeta | undefined) => boolean): Promise<void> {
    return new Promise<void>((resolve, reject) => {
      const barrier: Barrier = { remaining: 0, resolve, reject };
      barrier.remaining = this.hooks.holdPending(match, barrier);
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

/**
 * The `settled` event. Its latencies are worked out when a listener first reads them: the source
 * bridge, which listens to every settlement, reads only the metas.
 */
function settledEvent(
  sink: string,
  outcome: Outcome,
  metas: readonly (RecordMeta | undefined)[],
  acceptedAt: readonly number[],
  now: number,
): SinkEvents['settled'] {
  let latencies: number[] | undefined;
  return {
    sink,
    outcome,
    metas,
    get latenciesMs(): readonly number[] {
      if (latencies === undefined) {
        latencies = new Array<number>(metas.length);
        for (let k = 0; k < latencies.length; k++) latencies[k] = now - acceptedAt[k]!;
      }
      return latencies;
    },
  };
}
