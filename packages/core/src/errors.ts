/**
 * Every error Spillway raises is a `SpillwayError` with a stable `code`. Errors that come from a
 * store keep the driver's own code (SQLSTATE, Redis reply prefix, Kafka error type) as
 * `driverCode` and the driver's error as `cause`.
 */

/** The stable codes; the README lists them with their meaning. */
export type SpillwayErrorCode =
  | 'SPILLWAY_INVALID_OPTION'
  | 'SPILLWAY_SINK_CLOSED'
  | 'SPILLWAY_SINK_FAILED'
  | 'SPILLWAY_SHUTDOWN_TIMEOUT'
  | 'SPILLWAY_ABORTED'
  | 'SPILLWAY_RETRIES_EXHAUSTED'
  | 'SPILLWAY_RECORD_REJECTED'
  | 'SPILLWAY_NO_DEAD_LETTER_TARGET'
  | 'SPILLWAY_DEAD_LETTER_FAILED'
  | 'SPILLWAY_DEAD_LETTER_UNWRITABLE'
  | 'SPILLWAY_STORE_ERROR'
  | 'SPILLWAY_DECODE_ERROR'
  | 'SPILLWAY_INPUT_ERROR';

export interface SpillwayErrorOptions {
  cause?: unknown;
  /** The driver's own code: a SQLSTATE, a Redis reply prefix, a Kafka error type. */
  driverCode?: string | undefined;
  /** Structured details safe to log (never record contents). */
  details?: Readonly<Record<string, unknown>> | undefined;
}

export class SpillwayError extends Error {
  readonly code: SpillwayErrorCode;
  readonly driverCode: string | undefined;
  readonly details: Readonly<Record<string, unknown>>;

  constructor(code: SpillwayErrorCode, message: string, options: SpillwayErrorOptions = {}) {
    super(message, options.cause === undefined ? undefined : { cause: options.cause });
    this.name = new.target.name;
    this.code = code;
    this.driverCode = options.driverCode;
    this.details = options.details ?? {};
  }
}

/** `write()` after `close()` began, or on a sink that never opened. */
export class SinkClosedError extends SpillwayError {
  constructor(sink: string) {
    super('SPILLWAY_SINK_CLOSED', `Sink "${sink}" is closed and accepts no more records`);
  }
}

/** The sink met a fatal error and stopped accepting; `cause` is that error. */
export class SinkFailedError extends SpillwayError {
  constructor(sink: string, cause: unknown) {
    const why = cause instanceof Error ? cause.message : String(cause);
    super('SPILLWAY_SINK_FAILED', `Sink "${sink}" stopped after a fatal error: ${why}`, {
      cause,
      driverCode: driverCodeOf(cause),
    });
  }
}

/** Counts of records that were not terminal when a deadline passed, by state. */
export interface PendingCounts {
  buffered: number;
  inFlight: number;
  /** Of the in-flight records, those waiting out a retry backoff. */
  retrying: number;
}

export class ShutdownTimeoutError extends SpillwayError {
  readonly pending: PendingCounts;

  constructor(what: string, timeoutMs: number, pending: PendingCounts) {
    const total = pending.buffered + pending.inFlight;
    super(
      'SPILLWAY_SHUTDOWN_TIMEOUT',
      `${what} did not finish within ${timeoutMs} ms: ${total} record(s) still pending ` +
        `(${pending.buffered} buffered, ${pending.inFlight} in flight of which ${pending.retrying} retrying)`,
      { details: { timeoutMs, ...pending } },
    );
    this.pending = pending;
  }
}

export class AbortedError extends SpillwayError {
  constructor(what: string, cause?: unknown) {
    super('SPILLWAY_ABORTED', `${what} was aborted`, { cause });
  }
}

/**
 * A store error with the adapter's reading of it. Adapters throw (or return per record) these so
 * that dead letters and logs carry the driver's code and the safe details (constraint, table).
 */
export class StoreError extends SpillwayError {
  constructor(message: string, options: SpillwayErrorOptions = {}) {
    super('SPILLWAY_STORE_ERROR', message, options);
  }
}

/** The driver code of any error: ours, or the driver's own `code` property. */
export function driverCodeOf(error: unknown): string | undefined {
  if (error instanceof SpillwayError) return error.driverCode ?? driverCodeOf(error.cause);
  if (typeof error === 'object' && error !== null && 'code' in error) {
    const code = (error as { code: unknown }).code;
    if (typeof code === 'string' || typeof code === 'number') return String(code);
  }
  return undefined;
}

/** A message that is safe to log: the error's own text, never a record's contents. */
export function messageOf(error: unknown): string {
  return error instanceof Error ? error.message : String(error);
}
