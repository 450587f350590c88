export type { ExportableSink } from './exporter.js';
export { PrometheusExporter, registerSinkMetrics } from './exporter.js';
export type { MetricDefinition, MetricKey, MetricSource, MetricType } from './metric-names.js';
export { COMMON_LABELS, METRICS } from './metric-names.js';
export type { PrometheusExporterOptions } from './options.js';
