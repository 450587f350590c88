import { bucketsOption, DEFAULT_BUCKETS } from '@spillway/core';
import type { Registry } from 'prom-client';

/** Options of `PrometheusExporter` and `registerSinkMetrics()`. */
export interface PrometheusExporterOptions {
  /**
   * The `prom-client` registry to register the metrics with: your own (so one `/metrics` endpoint
   * serves your metrics and Spillway's), or a new one. One exporter per registry.
   * @default a new `Registry()`
   * @example
   * import { register } from 'prom-client';
   * new PrometheusExporter({ registry: register });
   */
  registry?: Registry;
  /**
   * Bucket upper bounds, in seconds, of the latency histograms (accept → durable, event time →
   * durable). Pick them around your `maxAgeMs`: the default `maxAgeMs` is 0.5 s.
   * @default [0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 0.75, 1, 2.5, 5, 10, 30]
   * @example
   * { latencyBuckets: [0.1, 0.2, 0.5, 1, 2] }
   */
  latencyBuckets?: readonly number[];
  /**
   * Bucket upper bounds, in seconds, of the store-write duration, slot-wait and backpressure-wait
   * histograms.
   * @default [0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10]
   * @example
   * { durationBuckets: [0.005, 0.05, 0.5, 5] }
   */
  durationBuckets?: readonly number[];
  /**
   * Bucket upper bounds of the records-per-batch histogram.
   * @default [1, 5, 10, 25, 50, 100, 250, 500, 1000, 2500, 5000, 10000]
   * @example
   * { batchRecordsBuckets: [100, 500, 1000, 5000] }
   */
  batchRecordsBuckets?: readonly number[];
  /**
   * Bucket upper bounds, in bytes, of the bytes-per-batch histogram.
   * @default [1024, 4096, 16384, 65536, 262144, 1048576, 2097152, 4194304, 16777216]
   * @example
   * { batchBytesBuckets: [65536, 1048576, 2097152] }
   */
  batchBytesBuckets?: readonly number[];
}

export const DEFAULT_LATENCY_BUCKETS = DEFAULT_BUCKETS.latency;
export const DEFAULT_DURATION_BUCKETS = DEFAULT_BUCKETS.duration;
export const DEFAULT_BATCH_RECORDS_BUCKETS = DEFAULT_BUCKETS.batchRecords;
export const DEFAULT_BATCH_BYTES_BUCKETS = DEFAULT_BUCKETS.batchBytes;
export { bucketsOption };
