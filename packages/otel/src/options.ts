import type { Meter, MeterProvider } from '@opentelemetry/api';
import { BUCKET_OPTION_NAMES, type BucketOptions } from '@spillway/core/kit';

/**
 * Options of `OtelSinkMetrics` and `instrumentSinks()`: where the instruments live, and the
 * histogram buckets shared with the Prometheus exporter (`BucketOptions`). With OpenTelemetry the
 * buckets are advice, which an SDK View can override. The SDK's own default boundaries are sized
 * for milliseconds, so without this advice every latency in seconds would fall in one bucket.
 */
export interface OtelSinkMetricsOptions extends BucketOptions {
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
}

/** The option names `OtelSinkMetrics` knows. */
export const OTEL_OPTION_NAMES = ['meter', 'meterProvider', ...BUCKET_OPTION_NAMES] as const;
