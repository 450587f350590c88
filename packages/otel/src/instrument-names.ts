/**
 * The OpenTelemetry instruments Spillway records: one table, used by the code, the tests and the
 * README. Names follow the OpenTelemetry naming guidelines: dotted, lowercase, the unit in `unit`
 * (UCUM: `s`, `By`, `{record}`), never in the name.
 */

export type InstrumentKind = 'gauge' | 'counter' | 'histogram';

export interface InstrumentDefinition {
  readonly name: string;
  /** `gauge` = ObservableGauge, `counter` = ObservableCounter (cumulative), `histogram` = Histogram. */
  readonly kind: InstrumentKind;
  readonly unit: string;
  /** Attributes besides `spillway.sink.name` and `spillway.sink.store`, which every point carries. */
  readonly extraAttributes: readonly string[];
  readonly description: string;
}

/** Attribute keys. */
export const ATTR_SINK = 'spillway.sink.name';
export const ATTR_STORE = 'spillway.sink.store';
export const ATTR_REASON = 'spillway.flush.reason';
export const ATTR_STATE = 'spillway.sink.state';

export const INSTRUMENTS = {
  bufferedRecords: {
    name: 'spillway.sink.buffered.records',
    kind: 'gauge',
    unit: '{record}',
    extraAttributes: [],
    description: 'Records accepted and waiting in the buffer for a batch.',
  },
  bufferedBytes: {
    name: 'spillway.sink.buffered.size',
    kind: 'gauge',
    unit: 'By',
    extraAttributes: [],
    description: 'Estimated bytes of the records waiting in the buffer.',
  },
  oldestAge: {
    name: 'spillway.sink.buffered.oldest_age',
    kind: 'gauge',
    unit: 's',
    extraAttributes: [],
    description: 'How long the oldest buffered record has waited; 0 when the buffer is empty.',
  },
  inFlightBatches: {
    name: 'spillway.sink.in_flight.batches',
    kind: 'gauge',
    unit: '{batch}',
    extraAttributes: [],
    description: 'Batches being written to the store now.',
  },
  inFlightRecords: {
    name: 'spillway.sink.in_flight.records',
    kind: 'gauge',
    unit: '{record}',
    extraAttributes: [],
    description: 'Records in batches being written, including those waiting out a retry backoff.',
  },
  pendingRecords: {
    name: 'spillway.sink.pending.records',
    kind: 'gauge',
    unit: '{record}',
    extraAttributes: [],
    description: 'Records accepted and not yet durable or dead-lettered (buffered + in flight).',
  },
  pendingBytes: {
    name: 'spillway.sink.pending.size',
    kind: 'gauge',
    unit: 'By',
    extraAttributes: [],
    description: 'Estimated bytes of the pending records.',
  },
  waitingWriters: {
    name: 'spillway.sink.waiting_writers',
    kind: 'gauge',
    unit: '{writer}',
    extraAttributes: [],
    description: 'write() calls waiting for room (backpressure now).',
  },
  state: {
    name: 'spillway.sink.state',
    kind: 'gauge',
    unit: '1',
    extraAttributes: [ATTR_STATE],
    description:
      'The sink state: 1 on the point of the current state (open, closing, closed, failed), 0 on the others.',
  },
  accepted: {
    name: 'spillway.sink.records.accepted',
    kind: 'counter',
    unit: '{record}',
    extraAttributes: [],
    description: 'Records accepted by write(), tryWrite() or writeDurable().',
  },
  written: {
    name: 'spillway.sink.records.written',
    kind: 'counter',
    unit: '{record}',
    extraAttributes: [],
    description: 'Records the store acknowledged as durable.',
  },
  deadLettered: {
    name: 'spillway.sink.records.dead_lettered',
    kind: 'counter',
    unit: '{record}',
    extraAttributes: [],
    description: 'Records handed to the dead-letter target.',
  },
  retries: {
    name: 'spillway.sink.retries',
    kind: 'counter',
    unit: '{retry}',
    extraAttributes: [],
    description: 'Failed writes that were retried after a backoff.',
  },
  flushes: {
    name: 'spillway.sink.flushes',
    kind: 'counter',
    unit: '{batch}',
    extraAttributes: [ATTR_REASON],
    description:
      'Batches started, by the trigger that started them (size, bytes, age, idle, manual, shutdown, revoke).',
  },
  acceptToDurable: {
    name: 'spillway.sink.accept_to_durable.duration',
    kind: 'histogram',
    unit: 's',
    extraAttributes: [],
    description: 'Time from a record being accepted to the store acknowledging it, per durable record.',
  },
  eventToDurable: {
    name: 'spillway.sink.event_to_durable.duration',
    kind: 'histogram',
    unit: 's',
    extraAttributes: [],
    description:
      "Time from a record's meta.eventTime to the store acknowledging it; records with an event time only.",
  },
  batchRecords: {
    name: 'spillway.sink.batch.records',
    kind: 'histogram',
    unit: '{record}',
    extraAttributes: [],
    description: 'Records per batch, recorded when a batch starts.',
  },
  batchBytes: {
    name: 'spillway.sink.batch.size',
    kind: 'histogram',
    unit: 'By',
    extraAttributes: [],
    description: 'Estimated bytes per batch, recorded when a batch starts.',
  },
  flushDuration: {
    name: 'spillway.sink.flush.duration',
    kind: 'histogram',
    unit: 's',
    extraAttributes: [],
    description: 'Duration of each successful store write (a batch, or one part of a split batch).',
  },
  slotWait: {
    name: 'spillway.sink.slot_wait.duration',
    kind: 'histogram',
    unit: 's',
    extraAttributes: [],
    description: 'How long a due batch waited for a free in-flight slot before it started.',
  },
  backpressureWait: {
    name: 'spillway.sink.backpressure_wait.duration',
    kind: 'histogram',
    unit: 's',
    extraAttributes: [],
    description: 'How long a write() waited for room under the pending bounds, per write that had to wait.',
  },
} as const satisfies Record<string, InstrumentDefinition>;

export type InstrumentKey = keyof typeof INSTRUMENTS;
