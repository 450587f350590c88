/**
 * Delivery: writes a batch to the adapter with the retry / split / fatal policy. A transient error
 * is retried after a full-jitter back-off within the retry budget; bad data is isolated by
 * bisecting the batch; a fatal error stops the sink. A partial write settles what landed first.
 */
import { sleep } from '../clock.js';
import { messageOf, SpillwayError } from '../errors.js';
import type { ResolvedOptions } from '../options.js';
import type { TypedEmitter } from '../typed-emitter.js';
import type { Batch, FlushReason, PartialWrite, SinkAdapter, SinkEvents } from '../types.js';
import type { DeadLetterRouter } from './dead-letter-routing.js';
import {
  type InFlight,
  noMetasColumn,
  type Outcome,
  type Part,
  partBytes,
  partLength,
  pick,
  positions,
} from './records.js';
import type { SinkStats } from './stats.js';

/**
 * Back-off delay with "full jitter": uniform in [0, min(cap, base · 2^attempt)], where `attempt`
 * counts retries from 0. Spreading delays over the whole interval keeps many clients that failed
 * together from retrying together.
 */
export function fullJitterDelay(
  retry: number,
  baseMs: number,
  capMs: number,
  random: () => number = Math.random,
): number {
  const ceiling = Math.min(capMs, baseMs * 2 ** retry);
  return random() * ceiling;
}

export interface DeliveryHooks<T> {
  settle(batch: InFlight<T>, part: Part, outcome: Outcome): void;
  fail(error: unknown): void;
  failed(): boolean;
}

export class Delivery<T> {
  private readonly withPrepared: boolean;

  constructor(
    private readonly name: string,
    private readonly adapter: SinkAdapter<T>,
    private readonly o: ResolvedOptions<T>,
    private readonly stats: SinkStats,
    private readonly events: TypedEmitter<SinkEvents>,
    private readonly deadLetters: DeadLetterRouter<T>,
    private readonly hooks: DeliveryHooks<T>,
  ) {
    this.withPrepared = adapter.prepare !== undefined;
  }

  /**
   * Writes the records of `batch` that `part` names (all of them when undefined) until each is
   * durable, dead-lettered, or the sink has failed. Sub-batches of a split are written one after
   * the other, so records of one key keep their order.
   */
  async deliver(batch: InFlight<T>, reason: FlushReason, part: Part): Promise<void> {
    const clock = this.o.clock;
    const { maxAttempts, baseDelayMs, maxDelayMs, maxElapsedMs } = this.o.retry;
    const firstTry = clock.now();
    let current = part;
    for (let attempt = 1; ; attempt++) {
      if (this.hooks.failed()) return;
      const started = clock.now();
      let error: unknown;
      let failed = false;
      let outcome: PartialWrite | undefined;
      try {
        outcome = (await this.adapter.write(this.toBatch(batch, current, reason, attempt))) ?? undefined;
      } catch (e) {
        failed = true;
        error = e;
      }
      const durationMs = clock.now() - started;
      this.stats.flushDurationMs.record(durationMs);

      if (!failed) {
        const rejected = outcome?.rejected ?? [];
        if (rejected.length === 0) {
          this.landed(batch, current, durationMs, attempt);
          return;
        }
        // Some records landed, some did not: settle the landed ones first (the store acknowledged
        // them, whatever happens next), then act on each refusal. Indexes are into the batch the
        // adapter was given; `at` maps them to positions in `batch`.
        const at = positions(batch, current);
        const refusedIdx = new Set<number>();
        const toRetry: number[] = [];
        const toDeadLetter: Array<{ position: number; error: unknown }> = [];
        let fatal: { error: unknown } | undefined;
        for (const r of rejected) {
          const position = at[r.index];
          if (position === undefined || refusedIdx.has(r.index)) continue;
          refusedIdx.add(r.index);
          const cls = this.classify(r.error);
          if (cls === 'fatal') fatal ??= { error: r.error };
          else if (cls === 'retry') {
            toRetry.push(position);
            error = r.error;
          } else toDeadLetter.push({ position, error: r.error });
        }
        // Positions stay ascending: a retry keeps the records' order.
        toRetry.sort((a, b) => a - b);
        const landed = at.filter((_, i) => !refusedIdx.has(i));
        if (landed.length > 0) this.landed(batch, landed, durationMs, attempt);
        if (fatal) {
          this.hooks.fail(fatal.error);
          return;
        }
        for (const d of toDeadLetter) {
          if (!(await this.deadLetters.route(batch, [d.position], 'rejected', d.error))) return;
        }
        if (toRetry.length === 0) return;
        current = toRetry;
      } else {
        const cls = this.classify(error);
        if (cls === 'fatal') {
          this.hooks.fail(error);
          return;
        }
        if (cls === 'split') {
          if (partLength(batch, current) === 1) {
            await this.deadLetters.route(batch, current, 'rejected', error);
            return;
          }
          const at = positions(batch, current);
          const mid = at.length >> 1;
          await this.deliver(batch, reason, at.slice(0, mid));
          await this.deliver(batch, reason, at.slice(mid));
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
        await this.deadLetters.route(batch, current, 'retries-exhausted', exhausted);
        return;
      }
      const delayMs = Math.min(
        fullJitterDelay(attempt - 1, baseDelayMs, maxDelayMs),
        Math.max(0, maxElapsedMs - elapsed),
      );
      this.stats.retries++;
      this.events.emit('retry', { sink: this.name, batchId: batch.id, attempt, delayMs, error });
      const waiting = partLength(batch, current);
      batch.retrying += waiting;
      try {
        // With the system clock this timer keeps the process alive through the back-off.
        await sleep(clock, delayMs);
      } finally {
        batch.retrying -= waiting;
      }
    }
  }

  private landed(batch: InFlight<T>, part: Part, durationMs: number, attempts: number): void {
    this.hooks.settle(batch, part, 'durable');
    this.events.emit('written', {
      sink: this.name,
      batchId: batch.id,
      records: partLength(batch, part),
      bytes: partBytes(batch, part),
      durationMs,
      attempts,
    });
  }

  private classify(error: unknown): 'retry' | 'split' | 'fatal' {
    try {
      const cls = this.adapter.classify(error);
      return cls === 'retry' || cls === 'split' ? cls : 'fatal';
    } catch {
      return 'fatal';
    }
  }

  /**
   * What the adapter is given: the batch's own columns for the whole batch (no copy), or the
   * records of a part picked out of them.
   */
  private toBatch(batch: InFlight<T>, part: Part, reason: FlushReason, attempt: number): Batch<T> {
    const n = partLength(batch, part);
    const records = pick(batch.records, part);
    const metas = batch.metas === undefined ? noMetasColumn(n) : pick(batch.metas, part);
    const bytes = partBytes(batch, part);
    const { id } = batch;
    if (!this.withPrepared) return { id, reason, attempt, records, metas, bytes };
    const prepared = batch.prepared === undefined ? new Array(n).fill(undefined) : pick(batch.prepared, part);
    return { id, reason, attempt, records, metas, bytes, prepared };
  }
}
