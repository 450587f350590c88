export { OtelSinkMetrics, instrumentSinks } from './sink-metrics.js';
export type { InstrumentableSink } from './sink-metrics.js';
export type { OtelSinkMetricsOptions } from './options.js';
export { INSTRUMENTS, ATTR_SINK, ATTR_STORE, ATTR_REASON, ATTR_STATE } from './instrument-names.js';
export type { InstrumentDefinition, InstrumentKind, InstrumentKey } from './instrument-names.js';
