import type { Distribution, FlushReason } from '@spillway/core';
import type { CellSpec } from './cell-spec.js';

/** Records that had not landed when the measured window closed. */
export interface Stuck {
  records: number;
  oldestAgeMs: number;
  meanAgeMs: number;
}

export interface LittleCheck {
  /** Time-average of records held by the batcher (accepted, not yet durable), from our own clock reads. */
  meanHeld: number;
  /** Records per second over the Little window (first arrival to last durable write). */
  throughput: number;
  /** Mean accept → durable, as the batcher reported it. */
  meanTimeHeldMs: number;
  /** meanHeld / (throughput × meanTimeHeld): 1 when both measurement paths agree; null when a record was stuck or none landed. */
  ratio: number | null;
}

export interface CellResult {
  id: string;
  spec: CellSpec;
  /** Records due by the schedule. */
  scheduled: number;
  /** Records handed to the batcher (fewer than scheduled when backpressure held the generator past the end). */
  offered: number;
  /** Offered records per second over the schedule's length: the realised rate. */
  realisedRate: number;
  /** Durable when the window closed. */
  durable: number;
  /** Durable records per second of load (the schedule's length, or longer when the generator fell behind). */
  throughput: number;
  latencyMs: Distribution;
  /** Scheduled time → durable: adds the time a record waited for room (backpressure). */
  scheduledLatencyMs: Distribution;
  /** p99 and max over every offered record, counting each stuck record at its age (a lower bound). */
  latencyWithStuckMs: { p99: number; max: number };
  stuck: Stuck;
  batches: number;
  meanBatchRecords: number;
  flushes: Record<FlushReason, number>;
  flushDurationMs: Distribution;
  peakBufferedRecords: number;
  peakBufferedBytes: number;
  peakRssMb: number;
  /** User + system CPU of the cell's process during the measured window. */
  cpuSeconds: number;
  little: LittleCheck;
  windowMs: number;
  storeVersion?: string;
}
