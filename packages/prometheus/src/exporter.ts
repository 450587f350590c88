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
import { Counter, Gauge, Histogram, Registry } from 'prom-client';
import { COMMON_LABELS, METRICS, type MetricDefinition } from './metric-names.js';
import { PROMETHEUS_OPTION_NAMES, type PrometheusExporterOptions } from './options.js';

/** The part of a `Sink` the exporter reads. */
export interface ExportableSink {
  readonly name: string;
  readonly kind: string;
  snapshot(): SinkSnapshot;
  on<E extends SinkEventName>(event: E, listener: (payload: SinkEvents[E]) => void): unknown;
  off<E extends SinkEventName>(event: E, listener: (payload: SinkEvents[E]) => void): unknown;
}

const STATES: readonly SinkState[] = ['open', 'closing', 'closed', 'failed'];

type Labels = { sink: string; store: string };

interface Exported {
  readonly sink: ExportableSink;
  readonly labels: Labels;
  /** Counter values already added, so each scrape adds only the growth since the last one. */
  readonly counted: Map<string, number>;
  readonly detach: () => void;
}

const registries = new WeakMap<Registry, PrometheusExporter>();

/**
 * Registers every added sink's metrics with a `prom-client` registry. Gauges and counters are read
 * from `sink.snapshot()` when the registry is scraped (one snapshot per sink per scrape);
 * histograms are real Prometheus histograms fed from the sink's events, so their `_bucket`,
 * `_sum` and `_count` series aggregate correctly across instances. Histograms observe from the
 * moment a sink is added: add sinks right after creating them.
 */
export class PrometheusExporter {
  readonly registry: Registry;
  private readonly sinks = new Map<string, Exported>();
  private readonly gauges: Record<GaugeReading, Gauge<'sink' | 'store'>>;
  private readonly stateGauge: Gauge<'sink' | 'store' | 'state'>;
  private readonly counters: Record<CounterReading, Counter<'sink' | 'store'>>;
  private readonly flushes: Counter<'sink' | 'store' | 'reason'>;
  private readonly histograms: {
    acceptToDurable: Histogram<'sink' | 'store'>;
    eventToDurable: Histogram<'sink' | 'store'>;
    batchRecords: Histogram<'sink' | 'store'>;
    batchBytes: Histogram<'sink' | 'store'>;
    flushDuration: Histogram<'sink' | 'store'>;
    slotWait: Histogram<'sink' | 'store'>;
    backpressureWait: Histogram<'sink' | 'store'>;
  };
  private snapshots: Map<string, SinkSnapshot> | undefined;

  constructor(options: PrometheusExporterOptions = {}) {
    knownOptions(options, PROMETHEUS_OPTION_NAMES);
    const registry = options.registry ?? new Registry();
    if (!(registry instanceof Registry)) throw invalidOption('registry', 'a prom-client Registry', registry);
    if (registries.has(registry)) {
      throw invalidOption(
        'registry',
        'a registry without a Spillway exporter (add sinks to the exporter already on it)',
        registry,
      );
    }
    const { latency, duration, batchRecords, batchBytes } = resolveBuckets(options);
    this.registry = registry;

    const registers = [registry];
    const common = [...COMMON_LABELS];
    const gauge = (key: GaugeReading) => {
      const def: MetricDefinition = METRICS[key];
      return new Gauge({
        name: def.name,
        help: def.help,
        labelNames: common,
        registers,
        collect: () => {
          for (const [name, snap] of this.currentSnapshots()) {
            const e = this.sinks.get(name);
            if (e) this.gauges[key].set(e.labels, GAUGE_READINGS[key](snap));
          }
        },
      });
    };
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
    this.stateGauge = new Gauge({
      name: METRICS.state.name,
      help: METRICS.state.help,
      labelNames: [...common, 'state'],
      registers,
      collect: () => {
        for (const [name, snap] of this.currentSnapshots()) {
          const e = this.sinks.get(name);
          if (!e) continue;
          for (const state of STATES)
            this.stateGauge.set({ ...e.labels, state }, snap.state === state ? 1 : 0);
        }
      },
    });
    const counter = (key: CounterReading) => {
      const def: MetricDefinition = METRICS[key];
      return new Counter({
        name: def.name,
        help: def.help,
        labelNames: common,
        registers,
        collect: () => {
          for (const [name, snap] of this.currentSnapshots()) {
            const e = this.sinks.get(name);
            if (e) this.advance(e, key, this.counters[key], e.labels, COUNTER_READINGS[key](snap));
          }
        },
      });
    };
    this.counters = {
      accepted: counter('accepted'),
      written: counter('written'),
      deadLettered: counter('deadLettered'),
      retries: counter('retries'),
    };
    this.flushes = new Counter({
      name: METRICS.flushes.name,
      help: METRICS.flushes.help,
      labelNames: [...common, 'reason'],
      registers,
      collect: () => {
        for (const [name, snap] of this.currentSnapshots()) {
          const e = this.sinks.get(name);
          if (!e) continue;
          for (const reason of FLUSH_REASONS) {
            this.advance(e, `flushes:${reason}`, this.flushes, { ...e.labels, reason }, snap.flushes[reason]);
          }
        }
      },
    });
    const histogram = (key: keyof PrometheusExporter['histograms'], buckets: number[]) => {
      const def: MetricDefinition = METRICS[key];
      return new Histogram({ name: def.name, help: def.help, labelNames: common, buckets, registers });
    };
    this.histograms = {
      acceptToDurable: histogram('acceptToDurable', latency),
      eventToDurable: histogram('eventToDurable', latency),
      batchRecords: histogram('batchRecords', batchRecords),
      batchBytes: histogram('batchBytes', batchBytes),
      flushDuration: histogram('flushDuration', duration),
      slotWait: histogram('slotWait', duration),
      backpressureWait: histogram('backpressureWait', duration),
    };
    registries.set(registry, this);
  }

  /** The exporter already registered on `registry`, if any. */
  static of(registry: Registry): PrometheusExporter | undefined {
    return registries.get(registry);
  }

  /**
   * Starts exporting a sink's metrics; returns a function that stops it. Sink names must be unique
   * within one exporter: they are the `sink` label.
   */
  add(sink: ExportableSink): () => void {
    if (!sink || typeof sink.snapshot !== 'function' || typeof sink.on !== 'function') {
      throw invalidOption('sink', 'a Sink', sink);
    }
    if (this.sinks.has(sink.name)) {
      throw invalidOption(
        'sink',
        `a sink whose name is not already exported (give each sink its own \`name\`)`,
        sink.name,
      );
    }
    const labels: Labels = { sink: sink.name, store: sink.kind };
    const h = this.histograms;

    const onSettled = (e: SinkEvents['settled']) => {
      if (e.outcome !== 'durable') return;
      const now = Date.now();
      for (let i = 0; i < e.latenciesMs.length; i++) {
        h.acceptToDurable.observe(labels, (e.latenciesMs[i] as number) / 1000);
        const eventTime = e.metas[i]?.eventTime;
        if (eventTime !== undefined) h.eventToDurable.observe(labels, Math.max(0, now - eventTime) / 1000);
      }
    };
    const onFlush = (e: SinkEvents['flush']) => {
      h.batchRecords.observe(labels, e.records);
      h.batchBytes.observe(labels, e.bytes);
      h.slotWait.observe(labels, e.slotWaitMs / 1000);
    };
    const onWritten = (e: SinkEvents['written']) => h.flushDuration.observe(labels, e.durationMs / 1000);
    const onBackpressure = (e: SinkEvents['backpressure']) =>
      h.backpressureWait.observe(labels, e.waitedMs / 1000);
    sink.on('settled', onSettled);
    sink.on('flush', onFlush);
    sink.on('written', onWritten);
    sink.on('backpressure', onBackpressure);

    // Series exist from the start (at zero), so rate() and absent() behave before the first flush.
    for (const c of Object.values(this.counters)) c.inc(labels, 0);
    for (const reason of FLUSH_REASONS) this.flushes.inc({ ...labels, reason }, 0);
    for (const hist of Object.values(h)) hist.zero(labels);

    const entry: Exported = {
      sink,
      labels,
      counted: new Map(),
      detach: () => {
        sink.off('settled', onSettled);
        sink.off('flush', onFlush);
        sink.off('written', onWritten);
        sink.off('backpressure', onBackpressure);
      },
    };
    this.sinks.set(sink.name, entry);
    return () => this.remove(sink);
  }

  /** Stops exporting a sink and removes its series. */
  remove(sink: ExportableSink): void {
    const entry = this.sinks.get(sink.name);
    if (!entry || entry.sink !== sink) return;
    entry.detach();
    this.sinks.delete(sink.name);
    const labels = entry.labels;
    for (const g of Object.values(this.gauges)) g.remove(labels);
    for (const state of STATES) this.stateGauge.remove({ ...labels, state });
    for (const c of Object.values(this.counters)) c.remove(labels);
    for (const reason of FLUSH_REASONS) this.flushes.remove({ ...labels, reason });
    for (const hist of Object.values(this.histograms)) hist.remove(labels);
  }

  /** Removes every sink and unregisters the metrics from the registry. */
  close(): void {
    for (const e of [...this.sinks.values()]) this.remove(e.sink);
    for (const def of Object.values(METRICS)) this.registry.removeSingleMetric(def.name);
    registries.delete(this.registry);
  }

  /** The text exposition of the whole registry (Prometheus text format 0.0.4 by default). */
  metrics(): Promise<string> {
    return this.registry.metrics();
  }

  /**
   * One snapshot per sink per scrape, so the values of one scrape agree with each other:
   * `registry.metrics()` calls every collect() in one synchronous pass, and the cache is dropped
   * in the next microtask, before any later code can run.
   */
  private currentSnapshots(): Map<string, SinkSnapshot> {
    if (this.snapshots) return this.snapshots;
    const snaps = new Map<string, SinkSnapshot>();
    for (const [name, e] of this.sinks) snaps.set(name, e.sink.snapshot());
    this.snapshots = snaps;
    queueMicrotask(() => {
      this.snapshots = undefined;
    });
    return snaps;
  }

  /** Adds to a counter the growth of a snapshot counter since the last scrape. */
  private advance<L extends string>(
    e: Exported,
    key: string,
    counter: Counter<L>,
    labels: Record<L, string>,
    value: number,
  ): void {
    const before = e.counted.get(key) ?? 0;
    if (value > before) {
      counter.inc(labels, value - before);
      e.counted.set(key, value);
    }
  }
}

/**
 * Exports the sinks' metrics to a registry (a new one unless `options.registry` is given) and
 * returns the exporter. Called again with the same registry, it adds to the exporter already there.
 */
export function registerSinkMetrics(
  sinks: ExportableSink | readonly ExportableSink[],
  options: PrometheusExporterOptions = {},
): PrometheusExporter {
  const existing = options.registry ? PrometheusExporter.of(options.registry) : undefined;
  const exporter = existing ?? new PrometheusExporter(options);
  for (const sink of Array.isArray(sinks) ? sinks : [sinks as ExportableSink]) exporter.add(sink);
  return exporter;
}
