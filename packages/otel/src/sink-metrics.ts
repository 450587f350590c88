import {
  type Attributes,
  type BatchObservableCallback,
  type Histogram,
  type Meter,
  metrics,
  type Observable,
  type ObservableCounter,
  type ObservableGauge,
} from '@opentelemetry/api';
import {
  FLUSH_REASONS,
  type SinkEventName,
  type SinkEvents,
  type SinkSnapshot,
  type SinkState,
} from '@spillway/core';
import {
  COUNTER_READINGS,
  type CounterReading,
  GAUGE_READINGS,
  type GaugeReading,
  invalidOption,
  knownOptions,
  resolveBuckets,
} from '@spillway/core/kit';
import {
  ATTR_REASON,
  ATTR_SINK,
  ATTR_STATE,
  ATTR_STORE,
  INSTRUMENTS,
  type InstrumentDefinition,
} from './instrument-names.js';
import { OTEL_OPTION_NAMES, type OtelSinkMetricsOptions } from './options.js';

/** The part of a `Sink` the instrumentation reads. */
export interface InstrumentableSink {
  readonly name: string;
  readonly kind: string;
  snapshot(): SinkSnapshot;
  on<E extends SinkEventName>(event: E, listener: (payload: SinkEvents[E]) => void): unknown;
  off<E extends SinkEventName>(event: E, listener: (payload: SinkEvents[E]) => void): unknown;
}

const METER_NAME = '@spillway/otel';
const STATES: readonly SinkState[] = ['open', 'closing', 'closed', 'failed'];

type HistogramKey =
  | 'acceptToDurable'
  | 'eventToDurable'
  | 'batchRecords'
  | 'batchBytes'
  | 'flushDuration'
  | 'slotWait'
  | 'backpressureWait';

interface Instrumented {
  readonly sink: InstrumentableSink;
  readonly attributes: Attributes;
  readonly detach: () => void;
}

/**
 * Records every added sink's metrics through the OpenTelemetry metrics API. Gauges and counters
 * are asynchronous instruments read from `sink.snapshot()` once per collection (one batch
 * callback); histograms are synchronous instruments fed from the sink's events from the moment the
 * sink is added. With no SDK installed the API is a no-op.
 */
export class OtelSinkMetrics {
  readonly meter: Meter;
  private readonly sinks = new Map<string, Instrumented>();
  private readonly gauges: Record<GaugeReading, ObservableGauge>;
  private readonly stateGauge: ObservableGauge;
  private readonly counters: Record<CounterReading, ObservableCounter>;
  private readonly flushes: ObservableCounter;
  private readonly histograms: Record<HistogramKey, Histogram>;
  private readonly observables: Observable[];
  private readonly callback: BatchObservableCallback;
  private closed = false;

  constructor(options: OtelSinkMetricsOptions = {}) {
    knownOptions(options, OTEL_OPTION_NAMES);
    if (options.meter !== undefined && typeof options.meter?.createHistogram !== 'function') {
      throw invalidOption('meter', 'an OpenTelemetry Meter', options.meter);
    }
    if (options.meterProvider !== undefined && typeof options.meterProvider?.getMeter !== 'function') {
      throw invalidOption('meterProvider', 'an OpenTelemetry MeterProvider', options.meterProvider);
    }
    const buckets = resolveBuckets(options);
    const meter = options.meter ?? (options.meterProvider ?? metrics.getMeterProvider()).getMeter(METER_NAME);
    this.meter = meter;

    const describe = (def: InstrumentDefinition) => ({ description: def.description, unit: def.unit });
    const gauge = (key: GaugeReading) =>
      meter.createObservableGauge(INSTRUMENTS[key].name, describe(INSTRUMENTS[key]));
    this.gauges = {
      bufferedRecords: gauge('bufferedRecords'),
      bufferedBytes: gauge('bufferedBytes'),
      oldestAge: gauge('oldestAge'),
      inFlightBatches: gauge('inFlightBatches'),
      inFlightRecords: gauge('inFlightRecords'),
      pendingRecords: gauge('pendingRecords'),
      pendingBytes: gauge('pendingBytes'),
      waitingWriters: gauge('waitingWriters'),
    };
    this.stateGauge = meter.createObservableGauge(INSTRUMENTS.state.name, describe(INSTRUMENTS.state));
    const counter = (key: CounterReading) =>
      meter.createObservableCounter(INSTRUMENTS[key].name, describe(INSTRUMENTS[key]));
    this.counters = {
      accepted: counter('accepted'),
      written: counter('written'),
      deadLettered: counter('deadLettered'),
      retries: counter('retries'),
    };
    this.flushes = meter.createObservableCounter(INSTRUMENTS.flushes.name, describe(INSTRUMENTS.flushes));
    const histogram = (key: HistogramKey, boundaries: number[]) =>
      meter.createHistogram(INSTRUMENTS[key].name, {
        ...describe(INSTRUMENTS[key]),
        advice: { explicitBucketBoundaries: boundaries },
      });
    this.histograms = {
      acceptToDurable: histogram('acceptToDurable', buckets.latency),
      eventToDurable: histogram('eventToDurable', buckets.latency),
      batchRecords: histogram('batchRecords', buckets.batchRecords),
      batchBytes: histogram('batchBytes', buckets.batchBytes),
      flushDuration: histogram('flushDuration', buckets.duration),
      slotWait: histogram('slotWait', buckets.duration),
      backpressureWait: histogram('backpressureWait', buckets.duration),
    };

    this.observables = [
      ...Object.values(this.gauges),
      this.stateGauge,
      ...Object.values(this.counters),
      this.flushes,
    ];
    // One snapshot per sink per collection, shared by every asynchronous instrument.
    this.callback = (result) => {
      for (const { sink, attributes } of this.sinks.values()) {
        const snap = sink.snapshot();
        for (const key of Object.keys(GAUGE_READINGS) as GaugeReading[])
          result.observe(this.gauges[key], GAUGE_READINGS[key](snap), attributes);
        for (const state of STATES)
          result.observe(this.stateGauge, snap.state === state ? 1 : 0, {
            ...attributes,
            [ATTR_STATE]: state,
          });
        for (const key of Object.keys(COUNTER_READINGS) as CounterReading[])
          result.observe(this.counters[key], COUNTER_READINGS[key](snap), attributes);
        for (const reason of FLUSH_REASONS)
          result.observe(this.flushes, snap.flushes[reason], { ...attributes, [ATTR_REASON]: reason });
      }
    };
    meter.addBatchObservableCallback(this.callback, this.observables);
  }

  /**
   * Starts recording a sink's metrics; returns a function that stops it. Sink names must be
   * unique within one instance: they are the `spillway.sink.name` attribute.
   */
  add(sink: InstrumentableSink): () => void {
    if (this.closed) {
      // Adding after close() opens the instrumentation again.
      this.meter.addBatchObservableCallback(this.callback, this.observables);
      this.closed = false;
    }
    if (!sink || typeof sink.snapshot !== 'function' || typeof sink.on !== 'function')
      throw invalidOption('sink', 'a Sink', sink);
    if (this.sinks.has(sink.name)) {
      throw invalidOption(
        'sink',
        'a sink whose name is not already instrumented (give each sink its own `name`)',
        sink.name,
      );
    }
    const attributes: Attributes = { [ATTR_SINK]: sink.name, [ATTR_STORE]: sink.kind };
    const h = this.histograms;
    const onSettled = (e: SinkEvents['settled']) => {
      if (e.outcome !== 'durable') return;
      const now = Date.now();
      for (let i = 0; i < e.latenciesMs.length; i++) {
        h.acceptToDurable.record((e.latenciesMs[i] as number) / 1000, attributes);
        const eventTime = e.metas[i]?.eventTime;
        if (eventTime !== undefined) h.eventToDurable.record(Math.max(0, now - eventTime) / 1000, attributes);
      }
    };
    const onFlush = (e: SinkEvents['flush']) => {
      h.batchRecords.record(e.records, attributes);
      h.batchBytes.record(e.bytes, attributes);
      h.slotWait.record(e.slotWaitMs / 1000, attributes);
    };
    const onWritten = (e: SinkEvents['written']) => h.flushDuration.record(e.durationMs / 1000, attributes);
    const onBackpressure = (e: SinkEvents['backpressure']) =>
      h.backpressureWait.record(e.waitedMs / 1000, attributes);
    sink.on('settled', onSettled);
    sink.on('flush', onFlush);
    sink.on('written', onWritten);
    sink.on('backpressure', onBackpressure);
    this.sinks.set(sink.name, {
      sink,
      attributes,
      detach: () => {
        sink.off('settled', onSettled);
        sink.off('flush', onFlush);
        sink.off('written', onWritten);
        sink.off('backpressure', onBackpressure);
      },
    });
    return () => this.remove(sink);
  }

  /** Stops recording a sink: its event listeners go and its asynchronous points stop. */
  remove(sink: InstrumentableSink): void {
    const entry = this.sinks.get(sink.name);
    if (!entry || entry.sink !== sink) return;
    entry.detach();
    this.sinks.delete(sink.name);
  }

  /** Removes every sink and the batch callback. */
  close(): void {
    if (this.closed) return;
    this.closed = true;
    for (const e of [...this.sinks.values()]) this.remove(e.sink);
    this.meter.removeBatchObservableCallback(this.callback, this.observables);
  }
}

/** Records the sinks' metrics through OpenTelemetry and returns the instrumentation. */
export function instrumentSinks(
  sinks: InstrumentableSink | readonly InstrumentableSink[],
  options: OtelSinkMetricsOptions = {},
): OtelSinkMetrics {
  const instrumentation = new OtelSinkMetrics(options);
  for (const sink of Array.isArray(sinks) ? sinks : [sinks as InstrumentableSink]) instrumentation.add(sink);
  return instrumentation;
}
