export { Sink, progressKey } from './sink.js';
export type { WriteOptions, CloseOptions } from './sink.js';
export type { SinkOptions, RetryOptions, ResolvedOptions } from './options.js';
export { DEFAULTS, defaultOrderingKey, invalidOption } from './options.js';
export type {
  RecordMeta,
  FlushReason,
  ErrorClass,
  Batch,
  PartialWrite,
  SinkAdapter,
  DeadLetter,
  DeadLetterReason,
  DeadLetterTarget,
  SinkState,
  SinkEvents,
  SinkEventName,
  SinkSnapshot,
  SinkCounters,
  Distribution,
} from './types.js';
export { FLUSH_REASONS } from './types.js';
export {
  SpillwayError,
  SinkClosedError,
  SinkFailedError,
  ShutdownTimeoutError,
  AbortedError,
  StoreError,
  driverCodeOf,
  messageOf,
} from './errors.js';
export type { SpillwayErrorCode, SpillwayErrorOptions, PendingCounts } from './errors.js';
export { ProgressTracker, toOffset } from './progress.js';
export { fullJitterDelay } from './retry.js';
export { Histogram } from './metrics.js';
export { estimateJsonBytes } from './size.js';
export { systemClock, ManualClock, sleep, settle } from './clock.js';
export type { Clock } from './clock.js';
export { FileDeadLetter, fileDeadLetter, sinkDeadLetter, deadLetterLine } from './dead-letter.js';
export type { FileDeadLetterOptions, DeadLetterLine, DeadLetterSinkLike } from './dead-letter.js';
export { toWritable, pipeInto } from './writable.js';
export type { WritableOptions } from './writable.js';
export { ShutdownCoordinator, installShutdown, SHUTDOWN_STAGES } from './shutdown.js';
export type {
  ShutdownOptions,
  ShutdownStage,
  ShutdownStep,
  ShutdownReport,
  StepContext,
  ClosableSink,
} from './shutdown.js';
