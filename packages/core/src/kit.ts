/**
 * `@spillway/core/kit`: the toolkit for adapter and exporter authors. Option checks that throw the
 * one invalid-option error, the readings and bucket options every metrics exporter shares, the
 * histogram, the typed event emitter, the socket error codes a classifier retries on, the one
 * way to name a source partition, and the one writer of a string as a quoted UTF-8 CSV field.
 * Applications need only `@spillway/core`.
 */

export { Histogram } from './metrics.js';
export type { NumberRule } from './option-checks.js';
export {
  booleanOption,
  choiceOption,
  countOption,
  functionOption,
  InvalidOptionError,
  invalidOption,
  knownOptions,
  nonNegativeOption,
  numberOption,
  positiveOption,
} from './option-checks.js';
export { partitionKey, toOffset } from './progress.js';
export { quotedCsvBound, writeQuotedCsv } from './quoted-csv.js';
export type { BucketOptions, CounterReading, GaugeReading } from './readings.js';
export {
  BUCKET_OPTION_NAMES,
  bucketsOption,
  COUNTER_READINGS,
  DEFAULT_BUCKETS,
  GAUGE_READINGS,
  resolveBuckets,
} from './readings.js';
export { estimateJsonBytes } from './size.js';
export { isSocketError, SOCKET_ERROR_CODES } from './socket-codes.js';
export type { PartitionRange, StoredOffsets } from './source-offsets.js';
export { kafkaCoordinates, repeatedSourceMessages } from './source-offsets.js';
export { TypedEmitter } from './typed-emitter.js';
