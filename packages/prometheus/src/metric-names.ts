/**
 * The metrics the exporter registers: one table, used by the code, the tests and the README.
 * Names follow Prometheus naming practice: a `spillway_sink_` prefix, base units (seconds, bytes)
 * in the name, `_total` on counters.
 */

export type MetricType = 'gauge' | 'counter' | 'histogram';

/** Where a value comes from: the sink's snapshot at scrape time, or its events as they happen. */
export type MetricSource = 'snapshot' | 'events';

export interface MetricDefinition {
  readonly name: string;
  readonly type: MetricType;
  /** Base unit, or `records` / `batches` / `writers` for plain counts. */
  readonly unit: string;
  /** Labels besides `sink` and `store`, which every metric carries. */
  readonly extraLabels: readonly string[];
  readonly source: MetricSource;
  readonly help: string;
}

/** Labels on every series: the sink's name and its adapter's kind (`postgres`, `redis`, `kafka`, …). */
export const COMMON_LABELS = ['sink', 'store'] as const;

export const METRICS = {
  bufferedRecords: {
    name: 'spillway_sink_buffered_records',
    type: 'gauge',
    unit: 'records',
    extraLabels: [],
    source: 'snapshot',
    help: 'Records accepted and waiting in the buffer for a batch.',
  },
  bufferedBytes: {
    name: 'spillway_sink_buffered_bytes',
    type: 'gauge',
    unit: 'bytes',
    extraLabels: [],
    source: 'snapshot',
    help: 'Estimated bytes of the records waiting in the buffer.',
  },
  oldestAge: {
    name: 'spillway_sink_oldest_buffered_age_seconds',
    type: 'gauge',
    unit: 'seconds',
    extraLabels: [],
    source: 'snapshot',
    help: 'How long the oldest buffered record has waited; 0 when the buffer is empty. Stays under maxAgeMs unless every in-flight slot is busy.',
  },
  inFlightBatches: {
    name: 'spillway_sink_in_flight_batches',
    type: 'gauge',
    unit: 'batches',
    extraLabels: [],
    source: 'snapshot',
    help: 'Batches being written to the store now (at most the sink concurrency).',
  },
  inFlightRecords: {
    name: 'spillway_sink_in_flight_records',
    type: 'gauge',
    unit: 'records',
    extraLabels: [],
    source: 'snapshot',
    help: 'Records in batches being written, including those waiting out a retry backoff.',
  },
  pendingRecords: {
    name: 'spillway_sink_pending_records',
    type: 'gauge',
    unit: 'records',
    extraLabels: [],
    source: 'snapshot',
    help: 'Records accepted and not yet durable or dead-lettered (buffered + in flight); bounded by maxPendingRecords.',
  },
  pendingBytes: {
    name: 'spillway_sink_pending_bytes',
    type: 'gauge',
    unit: 'bytes',
    extraLabels: [],
    source: 'snapshot',
    help: 'Estimated bytes of the pending records; bounded by maxPendingBytes.',
  },
  waitingWriters: {
    name: 'spillway_sink_waiting_writers',
    type: 'gauge',
    unit: 'writers',
    extraLabels: [],
    source: 'snapshot',
    help: 'write() calls waiting for room (backpressure now).',
  },
  state: {
    name: 'spillway_sink_state',
    type: 'gauge',
    unit: '1',
    extraLabels: ['state'],
    source: 'snapshot',
    help: 'The sink state: 1 on the series of the current state (open, closing, closed, failed), 0 on the others.',
  },
  accepted: {
    name: 'spillway_sink_accepted_records_total',
    type: 'counter',
    unit: 'records',
    extraLabels: [],
    source: 'snapshot',
    help: 'Records accepted by write(), tryWrite() or writeDurable().',
  },
  written: {
    name: 'spillway_sink_written_records_total',
    type: 'counter',
    unit: 'records',
    extraLabels: [],
    source: 'snapshot',
    help: 'Records the store acknowledged as durable.',
  },
  deadLettered: {
    name: 'spillway_sink_dead_lettered_records_total',
    type: 'counter',
    unit: 'records',
    extraLabels: [],
    source: 'snapshot',
    help: 'Records handed to the dead-letter target (rejected by the store, or retries exhausted).',
  },
  retries: {
    name: 'spillway_sink_retries_total',
    type: 'counter',
    unit: 'retries',
    extraLabels: [],
    source: 'snapshot',
    help: 'Failed writes that were retried after a backoff.',
  },
  flushes: {
    name: 'spillway_sink_flushes_total',
    type: 'counter',
    unit: 'batches',
    extraLabels: ['reason'],
    source: 'snapshot',
    help: 'Batches started, by the trigger that started them (size, bytes, age, idle, manual, shutdown, revoke).',
  },
  acceptToDurable: {
    name: 'spillway_sink_accept_to_durable_seconds',
    type: 'histogram',
    unit: 'seconds',
    extraLabels: [],
    source: 'events',
    help: 'Time from a record being accepted to the store acknowledging it, per durable record.',
  },
  eventToDurable: {
    name: 'spillway_sink_event_to_durable_seconds',
    type: 'histogram',
    unit: 'seconds',
    extraLabels: [],
    source: 'events',
    help: "Time from a record's meta.eventTime (wall clock) to the store acknowledging it; only records that carry an event time.",
  },
  batchRecords: {
    name: 'spillway_sink_batch_records',
    type: 'histogram',
    unit: 'records',
    extraLabels: [],
    source: 'events',
    help: 'Records per batch, observed when a batch starts.',
  },
  batchBytes: {
    name: 'spillway_sink_batch_bytes',
    type: 'histogram',
    unit: 'bytes',
    extraLabels: [],
    source: 'events',
    help: 'Estimated bytes per batch, observed when a batch starts.',
  },
  flushDuration: {
    name: 'spillway_sink_flush_duration_seconds',
    type: 'histogram',
    unit: 'seconds',
    extraLabels: [],
    source: 'events',
    help: 'Duration of each successful store write (a batch, or one part of a split batch).',
  },
  slotWait: {
    name: 'spillway_sink_slot_wait_seconds',
    type: 'histogram',
    unit: 'seconds',
    extraLabels: [],
    source: 'events',
    help: 'How long a due batch waited for a free in-flight slot before it started.',
  },
  backpressureWait: {
    name: 'spillway_sink_backpressure_wait_seconds',
    type: 'histogram',
    unit: 'seconds',
    extraLabels: [],
    source: 'events',
    help: 'How long a write() waited for room under the pending bounds, per write that had to wait.',
  },
} as const satisfies Record<string, MetricDefinition>;

export type MetricKey = keyof typeof METRICS;
