export type { Clock } from './clock.js';
export { ManualClock, settle, sleep, systemClock } from './clock.js';
export type { DeadLetterLine, DeadLetterSinkLike, FileDeadLetterOptions } from './dead-letter.js';
export { deadLetterLine, FileDeadLetter, fileDeadLetter, sinkDeadLetter } from './dead-letter.js';
export type { PendingCounts, SpillwayErrorCode, SpillwayErrorOptions } from './errors.js';
export {
  AbortedError,
  driverCodeOf,
  messageOf,
  ShutdownTimeoutError,
  SinkClosedError,
  SinkFailedError,
  SpillwayError,
  StoreError,
} from './errors.js';
export { Histogram } from './metrics.js';
export type { ResolvedOptions, RetryOptions, SinkOptions } from './options.js';
export { DEFAULTS, defaultOrderingKey, invalidOption } from './options.js';
export { ProgressTracker, toOffset } from './progress.js';
export type { CounterReading, GaugeReading } from './readings.js';
export { bucketsOption, COUNTER_READINGS, DEFAULT_BUCKETS, GAUGE_READINGS } from './readings.js';
export { fullJitterDelay } from './retry.js';
export type {
  ClosableSink,
  ShutdownOptions,
  ShutdownReport,
  ShutdownStage,
  ShutdownStep,
  StepContext,
} from './shutdown.js';
export { installShutdown, SHUTDOWN_STAGES, ShutdownCoordinator } from './shutdown.js';
export type { CloseOptions, WriteOptions } from './sink.js';
export { progressKey, Sink } from './sink.js';
export { estimateJsonBytes } from './size.js';
export type {
  Batch,
  DeadLetter,
  DeadLetterReason,
  DeadLetterTarget,
  Distribution,
  ErrorClass,
  FlushReason,
  PartialWrite,
  Prepared,
  RecordMeta,
  SinkAdapter,
  SinkCounters,
  SinkEventName,
  SinkEvents,
  SinkSnapshot,
  SinkState,
} from './types.js';
export { FLUSH_REASONS } from './types.js';
export type { WritableOptions } from './writable.js';
export { pipeInto, toWritable } from './writable.js';
