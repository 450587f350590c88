import type { Meter, MeterProvider } from '@opentelemetry/api';
import { bucketsOption, DEFAULT_BUCKETS } from '@spillway/core';

/** Options of `OtelSinkMetrics` and `instrumentSinks()`. */
export interface OtelSinkMetricsOptions {
  /**
   * The meter to create the instruments on. Without it, a meter named `@spillway/otel` is taken
   * from `meterProvider`, or from the global provider (a no-op until an OpenTelemetry SDK is
   * installed, so instrumenting costs next to nothing when nobody collects).
   * @default metrics.getMeterProvider().getMeter('@spillway/otel')
   * @example
   * { meter: metrics.getMeter('tandem-dock-service') }
   */
  meter?: Meter;
  /**
   * The provider to take the `@spillway/otel` meter from, when `meter` is not given.
   * @default the global provider (`metrics.getMeterProvider()`)
   * @example
   * { meterProvider: new MeterProvider({ readers: [reader] }) }
   */
  meterProvider?: MeterProvider;
  /**
   * Bucket boundaries, in seconds, advised for the latency histograms (accept → durable, event
   * time → durable). An SDK View can override them. The SDK's own default boundaries are sized
   * for milliseconds, so without this advice every latency in seconds would fall in one bucket.
   * @default [0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 0.75, 1, 2.5, 5, 10, 30]
   * @example
   * { latencyBuckets: [0.1, 0.2, 0.5, 1, 2] }
   */
  latencyBuckets?: readonly number[];
  /**
   * Bucket boundaries, in seconds, advised for the store-write, slot-wait and backpressure-wait
   * histograms.
   * @default [0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10]
   * @example
   * { durationBuckets: [0.005, 0.05, 0.5, 5] }
   */
  durationBuckets?: readonly number[];
  /**
   * Bucket boundaries advised for the records-per-batch histogram.
   * @default [1, 5, 10, 25, 50, 100, 250, 500, 1000, 2500, 5000, 10000]
   * @example
   * { batchRecordsBuckets: [100, 500, 1000, 5000] }
   */
  batchRecordsBuckets?: readonly number[];
  /**
   * Bucket boundaries, in bytes, advised for the bytes-per-batch histogram.
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
