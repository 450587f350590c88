import { Sink, type SinkAdapter } from '@spillway/core';
import { ManualClock, MemoryAdapter } from '@spillway/core/testing';
import parsePrometheusTextFormat from 'parse-prometheus-text-format';
import { Counter, Registry } from 'prom-client';
import { describe, expect, it } from 'vitest';
import { METRICS, PrometheusExporter, registerSinkMetrics } from '../src/index.js';

interface Parsed {
  name: string;
  help: string;
  type: string;
  metrics: Array<{
    value?: string;
    labels?: Record<string, string>;
    buckets?: Record<string, string>;
    count?: string;
    sum?: string;
  }>;
}

function makeSink(name: string, clock = new ManualClock()) {
  const store = new MemoryAdapter<{ dock: string }>();
  const sink = new Sink(store, { name, maxRecords: 3, maxAgeMs: 500, idleMs: 0, clock });
  return { sink, store, clock };
}

// parse-prometheus-text-format flattens a histogram family into one entry and drops its labels,
// `_sum` and `_count` when the series carry labels. So for histograms the tests read buckets from
// it only where one sink is registered, and read `_sum` / `_count` per label set from
// prom-client's JSON view (`histogramSeries`).
async function scrape(registry: Registry): Promise<Map<string, Parsed>> {
  const text = await registry.metrics();
  const families = parsePrometheusTextFormat(text) as Parsed[];
  return new Map(families.map((f) => [f.name, f]));
}

async function histogramSeries(registry: Registry, name: string, labels: Record<string, string>) {
  const metric = (await registry.getMetricsAsJSON()).find((m) => m.name === name);
  const values = (metric?.values ?? []).filter((v) =>
    Object.entries(labels).every(([k, want]) => v.labels[k] === want),
  );
  // prom-client's JSON view names each histogram series in `metricName`, which its types leave out.
  const pick = (suffix: string) =>
    values.find((v) => (v as { metricName?: string }).metricName === `${name}${suffix}`)?.value;
  return { sum: pick('_sum'), count: pick('_count'), sinks: new Set(values.map((v) => v.labels.sink)) };
}

function series(family: Parsed | undefined, labels: Record<string, string>) {
  const found = family?.metrics.find((m) => Object.entries(labels).every(([k, v]) => m.labels?.[k] === v));
  if (!found) throw new Error(`no series ${JSON.stringify(labels)} in ${family?.name}`);
  return found;
}

describe('PrometheusExporter', () => {
  it('exposes every documented metric with its documented type, readable by an independent text-format parser', async () => {
    const { sink, clock } = makeSink('docks');
    const exporter = new PrometheusExporter();
    exporter.add(sink);
    for (let i = 0; i < 3; i++) await sink.write({ dock: `d${i}` }); // size flush
    await clock.advance(0);
    await sink.write({ dock: 'd3' });
    await sink.write({ dock: 'd4' });
    await clock.advance(500); // age flush: these two waited exactly 0.5 s
    await sink.write({ dock: 'd5' });
    await clock.advance(200); // stays buffered, 0.2 s old

    // Source: Prometheus "Exposition formats", text format 0.0.4 — parsed by
    // parse-prometheus-text-format, not by prom-client itself.
    const parsed = await scrape(exporter.registry);
    for (const def of Object.values(METRICS)) {
      const family = parsed.get(def.name);
      expect(family, def.name).toBeDefined();
      expect(family?.type, def.name).toBe(def.type.toUpperCase());
      expect(family?.help, def.name).toBe(def.help);
      if (def.type === 'histogram') continue;
      for (const m of family?.metrics ?? []) {
        expect(m.labels?.sink).toBe('docks');
        expect(m.labels?.store).toBe('memory');
      }
    }

    const labels = { sink: 'docks', store: 'memory' };
    expect(series(parsed.get('spillway_sink_accepted_records_total'), labels).value).toBe('6');
    expect(series(parsed.get('spillway_sink_written_records_total'), labels).value).toBe('5');
    expect(series(parsed.get('spillway_sink_buffered_records'), labels).value).toBe('1');
    expect(Number(series(parsed.get('spillway_sink_oldest_buffered_age_seconds'), labels).value)).toBeCloseTo(
      0.2,
      9,
    );
    expect(series(parsed.get('spillway_sink_state'), { ...labels, state: 'open' }).value).toBe('1');
    expect(series(parsed.get('spillway_sink_state'), { ...labels, state: 'closed' }).value).toBe('0');

    const flushes = parsed.get('spillway_sink_flushes_total');
    expect(series(flushes, { ...labels, reason: 'size' }).value).toBe('1');
    expect(series(flushes, { ...labels, reason: 'age' }).value).toBe('1');
    // Every reason has a series from the start, at zero.
    expect(flushes?.metrics.map((m) => m.labels?.reason).sort()).toEqual([
      'age',
      'bytes',
      'idle',
      'manual',
      'revoke',
      'shutdown',
      'size',
    ]);
    expect(series(flushes, { ...labels, reason: 'idle' }).value).toBe('0');

    const batch = await histogramSeries(exporter.registry, 'spillway_sink_batch_records', labels);
    expect(batch.count).toBe(2);
    expect(batch.sum).toBe(5);

    const latencyTotals = await histogramSeries(
      exporter.registry,
      'spillway_sink_accept_to_durable_seconds',
      labels,
    );
    expect(latencyTotals.count).toBe(5);
    expect(latencyTotals.sum).toBeCloseTo(1.0, 9);
    const latency = parsed.get('spillway_sink_accept_to_durable_seconds')?.metrics[0];
    // Source: Prometheus "Exposition formats" — buckets are cumulative, `le` is an inclusive
    // upper bound, and the `+Inf` bucket equals the sample count.
    expect(latency?.buckets?.['0.25']).toBe('3');
    expect(latency?.buckets?.['0.5']).toBe('5');
    expect(latency?.buckets?.['+Inf']).toBe('5');
  });

  it('keeps histogram buckets cumulative with +Inf equal to _count', async () => {
    const { sink, clock } = makeSink('docks');
    const exporter = new PrometheusExporter();
    exporter.add(sink);
    for (let round = 0; round < 7; round++) {
      for (let i = 0; i <= round % 3; i++) await sink.write({ dock: `r${round}-${i}` });
      await clock.advance(100 * (round + 1));
    }
    await sink.flush();
    const parsed = await scrape(exporter.registry);
    for (const def of Object.values(METRICS).filter((d) => d.type === 'histogram')) {
      const { count } = await histogramSeries(exporter.registry, def.name, { sink: 'docks' });
      for (const m of parsed.get(def.name)?.metrics ?? []) {
        const bounds = Object.keys(m.buckets ?? {}).sort((a, b) =>
          a === '+Inf' ? 1 : b === '+Inf' ? -1 : Number(a) - Number(b),
        );
        const counts = bounds.map((b) => Number(m.buckets?.[b]));
        // Source: Prometheus "Exposition formats", text format 0.0.4, histogram section.
        for (let i = 1; i < counts.length; i++)
          expect(counts[i]).toBeGreaterThanOrEqual(counts[i - 1] as number);
        expect(bounds.at(-1)).toBe('+Inf');
        expect(counts.at(-1)).toBe(count);
      }
    }
    const written = series(parsed.get('spillway_sink_written_records_total'), { sink: 'docks' });
    expect(written.value).toBe('13'); // 1+2+3+1+2+3+1 records over seven rounds
  });

  it('observes how long a writer waited for room under the pending bound', async () => {
    const clock = new ManualClock();
    let release: () => void = () => {};
    const store: SinkAdapter<{ dock: string }> = {
      kind: 'memory',
      write: () => new Promise<void>((resolve) => (release = resolve)),
      classify: () => 'fatal',
    };
    const sink = new Sink(store, { name: 'slow', maxRecords: 2, maxPendingRecords: 2, idleMs: 0, clock });
    const exporter = registerSinkMetrics(sink);
    await sink.write({ dock: 'a' });
    await sink.write({ dock: 'b' }); // size flush; the write hangs until released
    const third = sink.write({ dock: 'c' }); // no room: waits
    await clock.advance(300);
    let parsed = await scrape(exporter.registry);
    expect(series(parsed.get('spillway_sink_waiting_writers'), { sink: 'slow' }).value).toBe('1');
    expect(series(parsed.get('spillway_sink_pending_records'), { sink: 'slow' }).value).toBe('2');
    release();
    await third;
    parsed = await scrape(exporter.registry);
    expect(series(parsed.get('spillway_sink_waiting_writers'), { sink: 'slow' }).value).toBe('0');
    const wait = await histogramSeries(exporter.registry, 'spillway_sink_backpressure_wait_seconds', {
      sink: 'slow',
    });
    expect(wait.count).toBe(1);
    expect(wait.sum).toBeCloseTo(0.3, 9);
    expect(parsed.get('spillway_sink_backpressure_wait_seconds')?.metrics[0]?.buckets?.['0.25']).toBe('0');
    expect(parsed.get('spillway_sink_backpressure_wait_seconds')?.metrics[0]?.buckets?.['0.5']).toBe('1');
  });

  it('counts records written before the sink was added, and its counters never go down between scrapes', async () => {
    const { sink, clock } = makeSink('late');
    for (let i = 0; i < 4; i++) await sink.write({ dock: `d${i}` });
    await clock.advance(500);
    const exporter = registerSinkMetrics(sink);
    const first = await scrape(exporter.registry);
    expect(series(first.get('spillway_sink_written_records_total'), { sink: 'late' }).value).toBe('4');
    const second = await scrape(exporter.registry);
    expect(series(second.get('spillway_sink_written_records_total'), { sink: 'late' }).value).toBe('4');
    await sink.write({ dock: 'd4' });
    await clock.advance(500);
    const third = await scrape(exporter.registry);
    expect(series(third.get('spillway_sink_written_records_total'), { sink: 'late' }).value).toBe('5');
  });

  it('labels each sink by name and refuses two sinks with the same name', () => {
    const exporter = new PrometheusExporter();
    exporter.add(makeSink('status').sink);
    exporter.add(makeSink('availability').sink);
    expect(() => exporter.add(makeSink('status').sink)).toThrow(TypeError);
    expect(() => exporter.add(makeSink('status').sink)).toThrow(/`sink`/);
  });

  it('gives each sink its own series and drops them on remove()', async () => {
    const a = makeSink('status');
    const b = makeSink('availability');
    const exporter = registerSinkMetrics([a.sink, b.sink]);
    await a.sink.write({ dock: 'x' });
    await a.clock.advance(500);
    let parsed = await scrape(exporter.registry);
    expect(series(parsed.get('spillway_sink_written_records_total'), { sink: 'status' }).value).toBe('1');
    expect(series(parsed.get('spillway_sink_written_records_total'), { sink: 'availability' }).value).toBe(
      '0',
    );
    exporter.remove(a.sink);
    parsed = await scrape(exporter.registry);
    const sinks = new Set(
      parsed.get('spillway_sink_written_records_total')?.metrics.map((m) => m.labels?.sink),
    );
    expect([...sinks]).toEqual(['availability']);
    const latency = await histogramSeries(exporter.registry, 'spillway_sink_accept_to_durable_seconds', {});
    expect(latency.sinks).toEqual(new Set(['availability']));
  });

  it("registers with the user's own registry beside the user's metrics, one exporter per registry", async () => {
    const registry = new Registry();
    new Counter({ name: 'tandem_rides_total', help: 'Rides started.', registers: [registry] }).inc(3);
    const { sink } = makeSink('docks');
    const exporter = registerSinkMetrics(sink, { registry });
    expect(exporter.registry).toBe(registry);
    expect(() => new PrometheusExporter({ registry })).toThrow(/`registry`/);
    // A second call on the same registry adds to the exporter already there.
    expect(registerSinkMetrics(makeSink('more').sink, { registry })).toBe(exporter);
    const parsed = await scrape(registry);
    expect(series(parsed.get('tandem_rides_total'), {}).value).toBe('3');
    expect(parsed.get('spillway_sink_buffered_records')?.metrics).toHaveLength(2);
    // Source: Prometheus "Exposition formats": the text format's content type.
    expect(registry.contentType).toBe('text/plain; version=0.0.4; charset=utf-8');
  });

  it('shows the closed state after close()', async () => {
    const { sink } = makeSink('docks');
    const exporter = registerSinkMetrics(sink);
    await sink.write({ dock: 'a' });
    await sink.close();
    const parsed = await scrape(exporter.registry);
    const state = parsed.get('spillway_sink_state');
    expect(series(state, { state: 'closed' }).value).toBe('1');
    expect(series(state, { state: 'open' }).value).toBe('0');
    expect(series(parsed.get('spillway_sink_flushes_total'), { reason: 'shutdown' }).value).toBe('1');
  });

  it('observes event time to durable for records that carry an event time', async () => {
    const { sink, clock } = makeSink('docks');
    const exporter = registerSinkMetrics(sink);
    await sink.write({ dock: 'a' }, { eventTime: Date.now() - 1000 });
    await sink.write({ dock: 'b' });
    await clock.advance(500);
    const parsed = await scrape(exporter.registry);
    const m = parsed.get('spillway_sink_event_to_durable_seconds')?.metrics[0];
    expect(
      (await histogramSeries(exporter.registry, 'spillway_sink_event_to_durable_seconds', { sink: 'docks' }))
        .count,
    ).toBe(1);
    expect(m?.buckets?.['0.75']).toBe('0');
    expect(m?.buckets?.['2.5']).toBe('1');
  });

  it('close() unregisters the metrics so the registry can take a new exporter', async () => {
    const registry = new Registry();
    const exporter = registerSinkMetrics(makeSink('docks').sink, { registry });
    exporter.close();
    expect(await registry.metrics()).not.toContain('spillway_sink_');
    expect(() => new PrometheusExporter({ registry })).not.toThrow();
  });

  it('rejects bucket lists that are empty or not increasing, naming the option', () => {
    expect(() => new PrometheusExporter({ latencyBuckets: [] })).toThrow(/`latencyBuckets`/);
    expect(() => new PrometheusExporter({ batchRecordsBuckets: [10, 5] })).toThrow(/`batchRecordsBuckets`/);
    expect(() => new PrometheusExporter({ durationBuckets: [0.1, Number.NaN] })).toThrow(TypeError);
  });
});
