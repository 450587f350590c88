export { PrometheusExporter, registerSinkMetrics } from './exporter.js';
export type { ExportableSink } from './exporter.js';
export type { PrometheusExporterOptions } from './options.js';
export { METRICS, COMMON_LABELS } from './metric-names.js';
export type { MetricDefinition, MetricType, MetricSource, MetricKey } from './metric-names.js';
