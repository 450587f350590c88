export type { InstrumentDefinition, InstrumentKey, InstrumentKind } from './instrument-names.js';
export { ATTR_REASON, ATTR_SINK, ATTR_STATE, ATTR_STORE, INSTRUMENTS } from './instrument-names.js';
export type { OtelSinkMetricsOptions } from './options.js';
export type { InstrumentableSink } from './sink-metrics.js';
export { instrumentSinks, OtelSinkMetrics } from './sink-metrics.js';
