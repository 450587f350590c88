/**
 * The sink's counters and distributions. Every part of the engine counts here; the sink's
 * `counters()` and `snapshot()` read it. Events go through one `TypedEmitter<SinkEvents>`.
 */
import { Histogram } from '../metrics.js';
import { type Distribution, FLUSH_REASONS, type FlushReason } from '../types.js';

/** Resolution of the accept → durable distribution: 10 µs. */
export const LATENCY_STEPS_PER_MS = 100;

export class SinkStats {
  accepted = 0;
  written = 0;
  deadLettered = 0;
  retries = 0;
  batches = 0;
  backpressureWaits = 0;
  backpressureWaitMsTotal = 0;
  readonly flushes = Object.fromEntries(FLUSH_REASONS.map((r) => [r, 0])) as Record<FlushReason, number>;
  readonly batchRecords = new Histogram(1);
  readonly batchBytes = new Histogram(1);
  readonly flushDurationMs = new Histogram(1000);
  readonly acceptToDurableMs = new Histogram(LATENCY_STEPS_PER_MS);
  readonly eventToDurableMs = new Histogram(1000);
  readonly slotWaitMs = new Histogram(1000);
  readonly backpressureWaitMs = new Histogram(1000);

  /** The distributions of `snapshot()` (summarising them costs about a millisecond). */
  distributions(): Record<
    | 'batchRecords'
    | 'batchBytes'
    | 'flushDurationMs'
    | 'acceptToDurableMs'
    | 'eventToDurableMs'
    | 'slotWaitMs'
    | 'backpressureWaitMs',
    Distribution
  > {
    return {
      batchRecords: this.batchRecords.summary(),
      batchBytes: this.batchBytes.summary(),
      flushDurationMs: this.flushDurationMs.summary(),
      acceptToDurableMs: this.acceptToDurableMs.summary(),
      eventToDurableMs: this.eventToDurableMs.summary(),
      slotWaitMs: this.slotWaitMs.summary(),
      backpressureWaitMs: this.backpressureWaitMs.summary(),
    };
  }
}
