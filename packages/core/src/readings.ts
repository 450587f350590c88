import { invalidOption } from './options.js';
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
