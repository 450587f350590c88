/**
 * `@spillway/core`: what an application uses. The sink, its options, errors, dead-letter targets,
 * the shutdown coordinator, progress and the Node stream adapters. Adapter and exporter authors
 * find their toolkit in `@spillway/core/kit`; tests find clocks and fakes in `@spillway/core/testing`.
 */
export type { Clock } from './clock.js';
export { systemClock } from './clock.js';
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
export { InvalidOptionError } from './option-checks.js';
export type { CloseOptions, ResolvedOptions, RetryOptions, SinkOptions, WriteOptions } from './options.js';
export { DEFAULTS, defaultOrderingKey } from './options.js';
export { ProgressTracker } from './progress.js';
export type {
  ClosableSink,
  ShutdownOptions,
  ShutdownReport,
  ShutdownStage,
  ShutdownStep,
  StepContext,
} from './shutdown.js';
export { installShutdown, SHUTDOWN_STAGES, ShutdownCoordinator } from './shutdown.js';
export { Sink } from './sink.js';
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
