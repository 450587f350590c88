import { metrics } from '@opentelemetry/api';
import {
  AggregationTemporality,
  DataPointType,
  InMemoryMetricExporter,
  MeterProvider,
  type MetricData,
  PeriodicExportingMetricReader,
} from '@opentelemetry/sdk-metrics';
import { Sink, type SinkAdapter } from '@spillway/core';
import { ManualClock, MemoryAdapter } from '@spillway/core/testing';
import { afterEach, describe, expect, it } from 'vitest';
import {
  ATTR_REASON,
  ATTR_SINK,
  ATTR_STATE,
  ATTR_STORE,
  INSTRUMENTS,
  instrumentSinks,
  OtelSinkMetrics,
} from '../src/index.js';

function makeSink(name: string) {
  const clock = new ManualClock();
  const sink = new Sink(new MemoryAdapter<{ dock: string }>(), {
    name,
    maxRecords: 3,
    maxAgeMs: 500,
    idleMs: 0,
    clock,
  });
  return { sink, clock };
}

// The OpenTelemetry SDK's in-memory exporter behind a periodic reader; forceFlush() collects now.
function sdk() {
  const exporter = new InMemoryMetricExporter(AggregationTemporality.CUMULATIVE);
  const reader = new PeriodicExportingMetricReader({ exporter, exportIntervalMillis: 3_600_000 });
  const provider = new MeterProvider({ readers: [reader] });
  const collect = async (): Promise<Map<string, MetricData>> => {
    exporter.reset();
    await reader.forceFlush();
    const byName = new Map<string, MetricData>();
    for (const rm of exporter.getMetrics())
      for (const sm of rm.scopeMetrics) for (const m of sm.metrics) byName.set(m.descriptor.name, m);
    return byName;
  };
  return { provider, collect, shutdown: () => provider.shutdown() };
}

const providers: Array<{ shutdown(): Promise<void> }> = [];
afterEach(async () => {
  for (const p of providers.splice(0)) await p.shutdown();
});

function point(metric: MetricData | undefined, attrs: Record<string, string>) {
  const found = metric?.dataPoints.find((p) =>
    Object.entries(attrs).every(([k, v]) => p.attributes[k] === v),
  );
  if (!found) throw new Error(`no point ${JSON.stringify(attrs)} in ${metric?.descriptor.name}`);
  return found;
}

describe('OtelSinkMetrics', () => {
  it('records every documented instrument with its name, unit, kind and values through the SDK', async () => {
    const s = sdk();
    providers.push(s);
    const { sink, clock } = makeSink('docks');
    instrumentSinks(sink, { meterProvider: s.provider });
    for (let i = 0; i < 3; i++) await sink.write({ dock: `d${i}` }); // size flush
    await clock.advance(0);
    await sink.write({ dock: 'd3' }, { eventTime: Date.now() - 1000 });
    await sink.write({ dock: 'd4' });
    await clock.advance(500); // age flush: these two waited exactly 0.5 s
    await sink.write({ dock: 'd5' });
    await clock.advance(200); // stays buffered, 0.2 s old

    const got = await s.collect();
    const kinds = {
      gauge: DataPointType.GAUGE,
      counter: DataPointType.SUM,
      histogram: DataPointType.HISTOGRAM,
    };
    // The backpressure histogram has points only once a writer waited: its own test below.
    for (const def of Object.values(INSTRUMENTS).filter(
      (d) => d.name !== INSTRUMENTS.backpressureWait.name,
    )) {
      const m = got.get(def.name);
      expect(m, def.name).toBeDefined();
      expect(m?.descriptor.unit, def.name).toBe(def.unit);
      expect(m?.descriptor.description, def.name).toBe(def.description);
      expect(m?.dataPointType, def.name).toBe(kinds[def.kind]);
      if (def.kind === 'counter' && m?.dataPointType === DataPointType.SUM)
        expect(m.isMonotonic, def.name).toBe(true);
    }

    const attrs = { [ATTR_SINK]: 'docks', [ATTR_STORE]: 'memory' };
    expect(point(got.get('spillway.sink.records.accepted'), attrs).value).toBe(6);
    expect(point(got.get('spillway.sink.records.written'), attrs).value).toBe(5);
    expect(point(got.get('spillway.sink.buffered.records'), attrs).value).toBe(1);
    expect(point(got.get('spillway.sink.buffered.oldest_age'), attrs).value).toBeCloseTo(0.2, 9);
    expect(point(got.get('spillway.sink.state'), { ...attrs, [ATTR_STATE]: 'open' }).value).toBe(1);
    expect(point(got.get('spillway.sink.flushes'), { ...attrs, [ATTR_REASON]: 'size' }).value).toBe(1);
    expect(point(got.get('spillway.sink.flushes'), { ...attrs, [ATTR_REASON]: 'age' }).value).toBe(1);
    expect(point(got.get('spillway.sink.flushes'), { ...attrs, [ATTR_REASON]: 'idle' }).value).toBe(0);

    const latency = point(got.get('spillway.sink.accept_to_durable.duration'), attrs).value as {
      count: number;
      sum: number;
      buckets: { boundaries: number[]; counts: number[] };
    };
    expect(latency.count).toBe(5);
    expect(latency.sum).toBeCloseTo(1.0, 9);
    // The advised boundaries are in seconds; three records at 0 s and two at 0.5 s.
    const { boundaries, counts } = latency.buckets;
    expect(boundaries).toEqual([0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 0.75, 1, 2.5, 5, 10, 30]);
    // Source: OpenTelemetry metrics data model, explicit bucket histogram — bucket i counts
    // values in (boundaries[i-1], boundaries[i]]; counts are not cumulative.
    expect(counts[0]).toBe(3);
    expect(counts[boundaries.indexOf(0.5)]).toBe(2);
    expect(counts.reduce((a, b) => a + b, 0)).toBe(5);

    const batch = point(got.get('spillway.sink.batch.records'), attrs).value as {
      count: number;
      sum: number;
    };
    expect(batch.count).toBe(2);
    expect(batch.sum).toBe(5);

    // Only d3 carried an event time, 1 s before it was written.
    const eventLatency = point(got.get('spillway.sink.event_to_durable.duration'), attrs).value as {
      count: number;
      min: number;
    };
    expect(eventLatency.count).toBe(1);
    expect(eventLatency.min).toBeGreaterThanOrEqual(1);
  });

  it('records how long a writer waited for room under the pending bound', async () => {
    const s = sdk();
    providers.push(s);
    const clock = new ManualClock();
    let release: () => void = () => {};
    const store: SinkAdapter<{ dock: string }> = {
      kind: 'memory',
      write: () => new Promise<void>((resolve) => (release = resolve)),
      classify: () => 'fatal',
    };
    const sink = new Sink(store, { name: 'slow', maxRecords: 2, maxPendingRecords: 2, idleMs: 0, clock });
    instrumentSinks(sink, { meterProvider: s.provider });
    await sink.write({ dock: 'a' });
    await sink.write({ dock: 'b' }); // size flush; the write hangs until released
    const third = sink.write({ dock: 'c' }); // no room: waits
    await clock.advance(300);
    release();
    await third;
    const got = await s.collect();
    const wait = point(got.get('spillway.sink.backpressure_wait.duration'), { [ATTR_SINK]: 'slow' })
      .value as { count: number; sum: number };
    expect(wait.count).toBe(1);
    expect(wait.sum).toBeCloseTo(0.3, 9);
    expect(point(got.get('spillway.sink.waiting_writers'), { [ATTR_SINK]: 'slow' }).value).toBe(0);
  });

  it('reports counters as cumulative totals that include records written before the sink was added', async () => {
    const s = sdk();
    providers.push(s);
    const { sink, clock } = makeSink('late');
    for (let i = 0; i < 4; i++) await sink.write({ dock: `d${i}` });
    await clock.advance(500);
    instrumentSinks(sink, { meterProvider: s.provider });
    const attrs = { [ATTR_SINK]: 'late' };
    expect(point((await s.collect()).get('spillway.sink.records.written'), attrs).value).toBe(4);
    await sink.write({ dock: 'd4' });
    await clock.advance(500);
    expect(point((await s.collect()).get('spillway.sink.records.written'), attrs).value).toBe(5);
  });

  it('keeps sinks apart by the spillway.sink.name attribute and stops updating a removed sink', async () => {
    const s = sdk();
    providers.push(s);
    const a = makeSink('status');
    const b = makeSink('availability');
    const inst = instrumentSinks([a.sink, b.sink], { meterProvider: s.provider });
    expect(() => inst.add(makeSink('status').sink)).toThrow(/`sink`/);
    await a.sink.write({ dock: 'x' });
    await a.clock.advance(500);
    let got = await s.collect();
    expect(point(got.get('spillway.sink.records.written'), { [ATTR_SINK]: 'status' }).value).toBe(1);
    expect(point(got.get('spillway.sink.records.written'), { [ATTR_SINK]: 'availability' }).value).toBe(0);
    inst.remove(a.sink);
    await a.sink.write({ dock: 'y' });
    await a.clock.advance(500);
    await b.sink.write({ dock: 'z' });
    await b.clock.advance(500);
    expect(a.sink.snapshot().written).toBe(2);
    got = await s.collect();
    // The SDK may keep exporting the last cumulative point of a removed sink; it no longer moves.
    const status = got
      .get('spillway.sink.records.written')
      ?.dataPoints.find((p) => p.attributes[ATTR_SINK] === 'status');
    if (status) expect(status.value).toBe(1);
    expect(point(got.get('spillway.sink.records.written'), { [ATTR_SINK]: 'availability' }).value).toBe(1);
  });

  it('shows the closed state and the shutdown flush after close()', async () => {
    const s = sdk();
    providers.push(s);
    const { sink } = makeSink('docks');
    instrumentSinks(sink, { meterProvider: s.provider });
    await sink.write({ dock: 'a' });
    await sink.close();
    const got = await s.collect();
    expect(point(got.get('spillway.sink.state'), { [ATTR_STATE]: 'closed' }).value).toBe(1);
    expect(point(got.get('spillway.sink.flushes'), { [ATTR_REASON]: 'shutdown' }).value).toBe(1);
  });

  it('is a no-op on the global provider when no SDK is installed', async () => {
    metrics.disable();
    const { sink, clock } = makeSink('docks');
    const inst = instrumentSinks(sink);
    await sink.write({ dock: 'a' });
    await clock.advance(500);
    expect(sink.snapshot().written).toBe(1);
    inst.close();
  });

  it('rejects a bad meter or bucket list, naming the option', () => {
    expect(() => new OtelSinkMetrics({ meter: {} as never })).toThrow(/`meter`/);
    expect(() => new OtelSinkMetrics({ latencyBuckets: [1, 1] })).toThrow(/`latencyBuckets`/);
  });
});
