/**
 * The types every Spillway package shares: record metadata, the adapter contract, batches, flush
 * reasons, dead letters and events.
 */

/** Where a record came from. All fields are optional; the engine uses what is there. */
export interface RecordMeta {
  /** Source topic or stream name (kept in dead letters; part of the progress key). */
  readonly topic?: string | undefined;
  /** Source partition. Also the default ordering key. */
  readonly partition?: number | string | undefined;
  /** Source offset (Kafka offsets are strings of digits). Drives the progress tracker. */
  readonly offset?: string | number | bigint | undefined;
  /** When the event happened, ms since the epoch; enables event-time → durable latency. */
  readonly eventTime?: number | undefined;
  /** Ordering key that overrides the partition. Records of one key are written in accept order. */
  readonly key?: string | undefined;
  /**
   * True when the source keeps this record's progress itself (the Kafka bridge does, across all
   * the sinks a message went to): the sink's own `progress` tracker then skips it, which saves
   * a lookup and a slot per record.
   */
  readonly externalProgress?: boolean | undefined;
}

/** Why a batch was started. Metrics count flushes by reason. */
export type FlushReason = 'size' | 'bytes' | 'age' | 'idle' | 'manual' | 'shutdown' | 'revoke';

export const FLUSH_REASONS: readonly FlushReason[] = [
  'size',
  'bytes',
  'age',
  'idle',
  'manual',
  'shutdown',
  'revoke',
];

/**
 * What to do about a failed write.
 * - `retry`: transient (connection lost, timeout, serialization failure): back off and write again.
 * - `split`: the data is bad: bisect the batch to isolate the bad records; dead-letter them.
 * - `fatal`: misconfiguration (auth, missing table): the sink stops; nothing more is reported durable.
 */
export type ErrorClass = 'retry' | 'split' | 'fatal';

/**
 * One batch handed to an adapter. `records[i]` came with `metas[i]`. The arrays belong to the
 * engine: read them while `write()` runs; once it has settled the engine may clear the slots of
 * records that are terminal, so copy what you keep.
 */
export interface Batch<T> {
  /** Unique per sink; sub-batches of a split carry their parent's id. */
  readonly id: number;
  readonly reason: FlushReason;
  /** 1 on the first try of this exact set of records. */
  readonly attempt: number;
  readonly records: readonly T[];
  readonly metas: readonly (RecordMeta | undefined)[];
  /** Sum of the estimated sizes of the records. */
  readonly bytes: number;
  /**
   * `prepared[i]` is what the adapter's `prepare()` made of `records[i]` when it was accepted;
   * absent when the adapter has no `prepare()`, and `undefined` for a record it failed on.
   */
  readonly prepared?: readonly unknown[];
}

/** What `SinkAdapter.prepare()` makes of one record. */
export interface Prepared {
  /** Handed back to `write()` in `batch.prepared`. */
  readonly value: unknown;
  /** What the record adds to a write, in bytes (used instead of `estimateBytes`). */
  readonly bytes: number;
}

/** A batch write that landed for some records and not for others (e.g. a Redis pipeline). */
export interface PartialWrite {
  /** Indexes into `batch.records` that did not land, each with its own error. */
  readonly rejected: ReadonlyArray<{ readonly index: number; readonly error: unknown }>;
}

/**
 * The contract between the engine and a store. `write()` resolves when the batch is durable (the
 * store acknowledged it), or with a `PartialWrite` naming the records that did not land; it
 * rejects when nothing can be said to have landed. `classify()` reads an error.
 */
export interface SinkAdapter<T> {
  /** Short store name used in metrics and messages, e.g. `postgres`. */
  readonly kind: string;
  // biome-ignore lint/suspicious/noConfusingVoidType: an adapter that lands every record returns nothing
  write(batch: Batch<T>): Promise<void | PartialWrite>;
  classify(error: unknown): ErrorClass;
  /** Estimated bytes a record adds to a write; the engine has a default estimator. */
  estimateBytes?: ((record: T) => number) | undefined;
  /**
   * The per-record part of a write (mapping, encoding), done when the record is accepted, while
   * earlier batches are still in flight, instead of when its batch is written. What it returns
   * reaches `write()` as `batch.prepared[i]`, and its `bytes` size the record. When it throws,
   * the record is accepted with `prepared[i]` undefined: `write()` must then do the work itself
   * (and reject the record if it fails again).
   */
  prepare?: ((record: T) => Prepared) | undefined;
  /** Called once by `Sink.close()` after every record is terminal. */
  close?: (() => Promise<void>) | undefined;
}

/** Why a record went to the dead-letter target. */
export type DeadLetterReason = 'rejected' | 'retries-exhausted' | 'decode' | 'invalid';

export interface DeadLetter<T = unknown> {
  readonly sink: string;
  readonly record: T;
  readonly meta: RecordMeta | undefined;
  readonly reason: DeadLetterReason;
  readonly error: unknown;
  /** Wall-clock time of the decision, ms since the epoch. */
  readonly time: number;
}

/** Where isolated records go. A file target ships in core; any sink can serve (`sinkDeadLetter`). */
export interface DeadLetterTarget<T = unknown> {
  /** Resolves when the dead letters are stored; a rejection stops the sink (fatal). */
  write(letters: readonly DeadLetter<T>[]): Promise<void>;
  close?(): Promise<void>;
}

export type SinkState = 'open' | 'closing' | 'closed' | 'failed';

/** Event payloads, by event name. */
export interface SinkEvents {
  /** A batch started. `slotWaitMs`: how long it was due before a free in-flight slot let it go. */
  flush: {
    sink: string;
    batchId: number;
    reason: FlushReason;
    records: number;
    bytes: number;
    slotWaitMs: number;
  };
  /** A batch (or a part of a split batch) became durable. */
  written: {
    sink: string;
    batchId: number;
    records: number;
    bytes: number;
    durationMs: number;
    attempts: number;
  };
  /** A write failed and will be retried after `delayMs`. */
  retry: { sink: string; batchId: number; attempt: number; delayMs: number; error: unknown };
  /** Records went to the dead-letter target. */
  'dead-letter': { sink: string; batchId: number; count: number; reason: DeadLetterReason; error: unknown };
  /** A `write()` had to wait for room; emitted when the wait ends. */
  backpressure: { sink: string; waitedMs: number };
  /** Records reached a terminal state. The source bridge uses this to advance progress. */
  settled: {
    sink: string;
    outcome: 'durable' | 'dead-lettered';
    metas: readonly (RecordMeta | undefined)[];
    /** Accept → terminal latency of each record, ms. */
    latenciesMs: readonly number[];
  };
  /** A fatal error: the sink stopped accepting. */
  error: { sink: string; error: unknown };
}

export type SinkEventName = keyof SinkEvents;

/** Summary of a distribution (from an HdrHistogram). Values are in the unit the field names. */
export interface Distribution {
  count: number;
  min: number;
  mean: number;
  p50: number;
  p90: number;
  p99: number;
  max: number;
}

/** The gauges and counters of one sink. Counters only grow; gauges are the state now. */
export interface SinkCounters {
  name: string;
  kind: string;
  state: SinkState;
  // gauges
  bufferedRecords: number;
  bufferedBytes: number;
  oldestAgeMs: number;
  inFlightBatches: number;
  inFlightRecords: number;
  pendingRecords: number;
  pendingBytes: number;
  waitingWriters: number;
  // counters
  accepted: number;
  written: number;
  deadLettered: number;
  retries: number;
  batches: number;
  flushes: Record<FlushReason, number>;
  backpressureWaits: number;
  backpressureWaitMsTotal: number;
}

/** A point-in-time view of one sink: `SinkCounters` plus distributions. */
export interface SinkSnapshot extends SinkCounters {
  batchRecords: Distribution;
  batchBytes: Distribution;
  flushDurationMs: Distribution;
  acceptToDurableMs: Distribution;
  eventToDurableMs: Distribution;
  slotWaitMs: Distribution;
  backpressureWaitMs: Distribution;
}
