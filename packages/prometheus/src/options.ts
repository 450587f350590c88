import { BUCKET_OPTION_NAMES, type BucketOptions } from '@spillway/core/kit';
import type { Registry } from 'prom-client';

/**
 * Options of `PrometheusExporter` and `registerSinkMetrics()`: the registry, and the histogram
 * buckets shared with the OpenTelemetry exporter (`BucketOptions`).
 */
export interface PrometheusExporterOptions extends BucketOptions {
  /**
   * The `prom-client` registry to register the metrics with: your own (so one `/metrics` endpoint
   * serves your metrics and Spillway's), or a new one. One exporter per registry.
   * @default a new `Registry()`
   * @example
   * import { register } from 'prom-client';
   * new PrometheusExporter({ registry: register });
   */
  registry?: Registry;
}

/** The option names `PrometheusExporter` knows. */
export const PROMETHEUS_OPTION_NAMES = ['registry', ...BUCKET_OPTION_NAMES] as const;
