import { invalidOption } from './option-checks.js';
import type { SinkCounters } from './types.js';

/**
 * What metric exporters read from a sink, in the units they export (seconds, not ms), shared so
 * that every exporter reports the same figures under its own naming rules.
 */
export type GaugeReading =
  | 'bufferedRecords'
  | 'bufferedBytes'
  | 'oldestAge'
  | 'inFlightBatches'
  | 'inFlightRecords'
  | 'pendingRecords'
  | 'pendingBytes'
  | 'waitingWriters';

export const GAUGE_READINGS: Record<GaugeReading, (s: SinkCounters) => number> = {
  bufferedRecords: (s) => s.bufferedRecords,
  bufferedBytes: (s) => s.bufferedBytes,
  oldestAge: (s) => s.oldestAgeMs / 1000,
  inFlightBatches: (s) => s.inFlightBatches,
  inFlightRecords: (s) => s.inFlightRecords,
  pendingRecords: (s) => s.pendingRecords,
  pendingBytes: (s) => s.pendingBytes,
  waitingWriters: (s) => s.waitingWriters,
};

export type CounterReading = 'accepted' | 'written' | 'deadLettered' | 'retries';

export const COUNTER_READINGS: Record<CounterReading, (s: SinkCounters) => number> = {
  accepted: (s) => s.accepted,
  written: (s) => s.written,
  deadLettered: (s) => s.deadLettered,
  retries: (s) => s.retries,
};

/**
 * Histogram bucket bounds of a metrics exporter. Prometheus and OpenTelemetry read the same
 * distributions from a sink, so they share these options and their defaults.
 */
export interface BucketOptions {
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

/** The option names of `BucketOptions`, for an exporter's unknown-key check. */
export const BUCKET_OPTION_NAMES = [
  'latencyBuckets',
  'durationBuckets',
  'batchRecordsBuckets',
  'batchBytesBuckets',
] as const;

/** Default histogram bucket bounds of the exporters (latency and duration in seconds). */
export const DEFAULT_BUCKETS = {
  latency: [0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 0.75, 1, 2.5, 5, 10, 30],
  duration: [0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10],
  batchRecords: [1, 5, 10, 25, 50, 100, 250, 500, 1000, 2500, 5000, 10000],
  batchBytes: [1024, 4096, 16384, 65536, 262144, 1048576, 2097152, 4194304, 16777216],
} as const;

/** Checks a bucket list: finite, positive, strictly increasing, at least one. Returns a copy. */
export function bucketsOption(
  name: string,
  value: readonly number[] | undefined,
  fallback: readonly number[],
): number[] {
  if (value === undefined) return [...fallback];
  const ok =
    Array.isArray(value) &&
    value.length > 0 &&
    value.every(
      (v, i) =>
        typeof v === 'number' && Number.isFinite(v) && v > 0 && (i === 0 || v > (value[i - 1] as number)),
    );
  if (!ok) throw invalidOption(name, 'a non-empty array of finite numbers > 0 in increasing order', value);
  return [...value];
}

/** Checked bucket lists of an exporter's options, defaults filled in. */
export function resolveBuckets(options: BucketOptions): {
  latency: number[];
  duration: number[];
  batchRecords: number[];
  batchBytes: number[];
} {
  return {
    latency: bucketsOption('latencyBuckets', options.latencyBuckets, DEFAULT_BUCKETS.latency),
    duration: bucketsOption('durationBuckets', options.durationBuckets, DEFAULT_BUCKETS.duration),
    batchRecords: bucketsOption(
      'batchRecordsBuckets',
      options.batchRecordsBuckets,
      DEFAULT_BUCKETS.batchRecords,
    ),
    batchBytes: bucketsOption('batchBytesBuckets', options.batchBytesBuckets, DEFAULT_BUCKETS.batchBytes),
  };
}
