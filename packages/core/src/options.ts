import type { Clock } from './clock.js';
import { systemClock } from './clock.js';
import { countOption, functionOption, invalidOption, knownOptions, numberOption } from './option-checks.js';
import { partitionKey } from './progress.js';
import type { DeadLetterTarget, RecordMeta } from './types.js';

/** Retry budget for transient failures. Delays use full jitter: uniform in [0, min(cap, base·2^n)]. */
export interface RetryOptions {
  /**
   * Tries per batch, the first included. When they run out the batch goes to the dead-letter
   * target with reason `retries-exhausted`.
   * @default 12
   * @example { maxAttempts: 20 }
   */
  maxAttempts?: number;
  /**
   * Base of the exponential backoff, ms.
   * @default 100
   */
  baseDelayMs?: number;
  /**
   * Cap of one backoff delay, ms.
   * @default 5000
   */
  maxDelayMs?: number;
  /**
   * Give up once this long has passed since the first try of a batch, ms.
   * @default 120000
   * @example { maxElapsedMs: 600_000 } // ride out a ten-minute store outage
   */
  maxElapsedMs?: number;
}

export interface SinkOptions<T> {
  /**
   * Name used in metrics, events and errors.
   * @default the adapter's `kind`
   * @example 'dock-status'
   */
  name?: string;
  /**
   * Flush when this many records are buffered (`size`).
   * @default 1000
   * @example 5000
   */
  maxRecords?: number;
  /**
   * Flush when the buffered records' estimated bytes reach this (`bytes`). Common practice: 2 MiB.
   * @default 2097152
   */
  maxBytes?: number;
  /**
   * Flush when the oldest buffered record has waited this long (`age`): the latency bound.
   * Common practice: 0.5–1 s.
   * @default 500
   * @example 250
   */
  maxAgeMs?: number;
  /**
   * Flush when no record arrived for this long while the buffer is not empty (`idle`), so the
   * tail of a burst leaves at once. 0 turns it off.
   * @default 100
   */
  idleMs?: number;
  /**
   * Batches in flight at once. Two batches of one ordering key are never in flight together.
   * @default 1
   * @example 4
   */
  concurrency?: number;
  /**
   * Bound on records accepted but not yet terminal (buffered + in flight); `write()` waits beyond it.
   * Must be at least `maxRecords`.
   * @default maxRecords × (concurrency + 2)
   */
  maxPendingRecords?: number;
  /**
   * Bound on the bytes of the records accepted but not yet terminal (buffered + in flight); `write()`
   * waits beyond it. Must be at least `maxBytes`. Each pending record counts as its estimated bytes
   * (what it adds to a write) plus `recordOverheadBytes` (what it holds on the heap beyond that),
   * so that the bound follows the heap the pending records take. Measured with ~520-byte rows of
   * 8 fields into PostgreSQL insert mode (`benchmarks/src/core-memory.ts`), the live heap was
   * 0.97–0.98 × this bound at 64 and 256 MiB with the default overhead (about 1.4 × with none).
   * The `pendingBytes` gauge is the estimated bytes alone.
   * @default (maxBytes + maxRecords × recordOverheadBytes) × (concurrency + 2)
   * @example 64 * 1024 * 1024
   */
  maxPendingBytes?: number;
  /**
   * Heap bytes a pending record holds beyond its estimated bytes, counted per record against
   * `maxPendingBytes`: the record's object header and field slots, the engine's slots for it, and
   * the value an adapter's `prepare()` made of it. The default is calibrated on ~520-byte rows of 8
   * fields into PostgreSQL insert mode, which hold about 230 bytes of heap each beyond their
   * estimate; records of many small fields hold more, large flat records less. 0 counts estimated
   * bytes only.
   * @default 256
   * @example 512 // records of many short fields
   */
  recordOverheadBytes?: number;
  /**
   * Ordering key of a record. Records of one key are written in accept order. Records with no key
   * have no ordering promise between batches (with `concurrency: 1` everything stays in order).
   * @default meta.key, else `topic:partition` when meta.partition is set
   * @example (r) => r.dockId
   */
  orderingKey?: (record: T, meta: RecordMeta | undefined) => string | undefined;
  /**
   * Estimated bytes of a record; overrides the adapter's estimator.
   * @default the adapter's `estimateBytes`, else a rough JSON-size estimate
   */
  estimateBytes?: (record: T) => number;
  /** Retry budget. See `RetryOptions`. */
  retry?: RetryOptions;
  /**
   * Where records the store refuses go. Without one, a refused record is a fatal error
   * (`SPILLWAY_NO_DEAD_LETTER_TARGET`): nothing is dropped without a place to put it.
   * @example fileDeadLetter('/var/lib/tandem/dead-letter.ndjson')
   */
  deadLetter?: DeadLetterTarget<T>;
  /** Time source; tests pass a `ManualClock`. @default the system clock */
  clock?: Clock;
}

/** Options after defaults and validation. */
export interface ResolvedOptions<T> {
  name: string;
  maxRecords: number;
  maxBytes: number;
  maxAgeMs: number;
  idleMs: number;
  concurrency: number;
  maxPendingRecords: number;
  maxPendingBytes: number;
  recordOverheadBytes: number;
  orderingKey: (record: T, meta: RecordMeta | undefined) => string | undefined;
  estimateBytes: ((record: T) => number) | undefined;
  retry: Required<RetryOptions>;
  deadLetter: DeadLetterTarget<T> | undefined;
  clock: Clock;
}

export const DEFAULTS = {
  maxRecords: 1000,
  maxBytes: 2 * 1024 * 1024,
  maxAgeMs: 500,
  idleMs: 100,
  concurrency: 1,
  recordOverheadBytes: 256,
  retry: { maxAttempts: 12, baseDelayMs: 100, maxDelayMs: 5000, maxElapsedMs: 120_000 },
} as const;

const KNOWN = new Set([
  'name',
  'maxRecords',
  'maxBytes',
  'maxAgeMs',
  'idleMs',
  'concurrency',
  'maxPendingRecords',
  'maxPendingBytes',
  'recordOverheadBytes',
  'orderingKey',
  'estimateBytes',
  'retry',
  'deadLetter',
  'clock',
]);

export function defaultOrderingKey(_record: unknown, meta: RecordMeta | undefined): string | undefined {
  if (!meta) return undefined;
  if (meta.key !== undefined) return meta.key;
  if (meta.partition === undefined) return undefined;
  return partitionKey(meta.topic, meta.partition);
}

/** Applies defaults and validates; throws a `TypeError` naming the first bad option. */
export function resolveOptions<T>(
  options: SinkOptions<T> | undefined,
  adapterKind: string,
): ResolvedOptions<T> {
  const o = knownOptions(options, KNOWN);
  const name = o.name === undefined ? adapterKind : o.name;
  if (typeof name !== 'string' || name.length === 0)
    throw invalidOption('name', 'a non-empty string', o.name);

  const maxRecords = countOption('maxRecords', o.maxRecords, DEFAULTS.maxRecords);
  const maxBytes = countOption('maxBytes', o.maxBytes, DEFAULTS.maxBytes);
  const maxAgeMs = numberOption('maxAgeMs', o.maxAgeMs, DEFAULTS.maxAgeMs, { min: 0, exclusiveMin: true });
  const idleMs = numberOption('idleMs', o.idleMs, DEFAULTS.idleMs, { min: 0 });
  const concurrency = countOption('concurrency', o.concurrency, DEFAULTS.concurrency);
  const maxPendingRecords = countOption(
    'maxPendingRecords',
    o.maxPendingRecords,
    maxRecords * (concurrency + 2),
  );
  if (maxPendingRecords < maxRecords) {
    throw invalidOption(
      'maxPendingRecords',
      `an integer >= maxRecords (${maxRecords}), a bound of at least one batch`,
      maxPendingRecords,
    );
  }
  const recordOverheadBytes = numberOption(
    'recordOverheadBytes',
    o.recordOverheadBytes,
    DEFAULTS.recordOverheadBytes,
    { min: 0 },
  );
  // Room for `concurrency + 2` full batches, each counted with its records' overhead.
  const maxPendingBytes = countOption(
    'maxPendingBytes',
    o.maxPendingBytes,
    Math.ceil((maxBytes + maxRecords * recordOverheadBytes) * (concurrency + 2)),
  );
  if (maxPendingBytes < maxBytes) {
    throw invalidOption(
      'maxPendingBytes',
      `an integer >= maxBytes (${maxBytes}), a bound of at least one batch`,
      maxPendingBytes,
    );
  }

  const r = knownOptions(o.retry, ['maxAttempts', 'baseDelayMs', 'maxDelayMs', 'maxElapsedMs'], 'retry');
  const retry = {
    maxAttempts: countOption('retry.maxAttempts', r.maxAttempts, DEFAULTS.retry.maxAttempts, {
      allowInfinity: true,
    }),
    baseDelayMs: numberOption('retry.baseDelayMs', r.baseDelayMs, DEFAULTS.retry.baseDelayMs, { min: 0 }),
    maxDelayMs: numberOption('retry.maxDelayMs', r.maxDelayMs, DEFAULTS.retry.maxDelayMs, { min: 0 }),
    maxElapsedMs: numberOption('retry.maxElapsedMs', r.maxElapsedMs, DEFAULTS.retry.maxElapsedMs, {
      min: 0,
      allowInfinity: true,
    }),
  };

  const deadLetter = o.deadLetter as DeadLetterTarget<T> | undefined;
  if (
    deadLetter !== undefined &&
    (typeof deadLetter !== 'object' || deadLetter === null || typeof deadLetter.write !== 'function')
  ) {
    throw invalidOption('deadLetter', 'an object with a write(letters) method', deadLetter);
  }
  const clock = (o.clock ?? systemClock) as Clock;
  if (typeof clock.now !== 'function' || typeof clock.setTimeout !== 'function') {
    throw invalidOption('clock', 'an object with now(), wallNow(), setTimeout() and clearTimeout()', o.clock);
  }

  return {
    name,
    maxRecords,
    maxBytes,
    maxAgeMs,
    idleMs,
    concurrency,
    maxPendingRecords,
    maxPendingBytes,
    recordOverheadBytes,
    orderingKey: functionOption('orderingKey', o.orderingKey) ?? defaultOrderingKey,
    estimateBytes: functionOption('estimateBytes', o.estimateBytes),
    retry,
    deadLetter,
    clock,
  };
}

/** Options of one `write()`. */
export interface WriteOptions {
  /** Cancels a write that is waiting for room. */
  signal?: AbortSignal;
}

export interface CloseOptions {
  /** Reject if not every record is terminal by then. @default 30000 */
  timeoutMs?: number;
  /**
   * What a `write()` that arrives after close() began gets.
   * - `reject`: it rejects with `SPILLWAY_SINK_CLOSED` (and `tryWrite()` throws): writing to a
   *   sink your own code closed is a bug in that code, and it should hear about it.
   * - `park`: it never settles and its record is not accepted (`tryWrite()` returns false,
   *   `tryWriteMany()` 0), so a producer loop that awaits `write()` simply stops where it is.
   *   The shutdown coordinator closes sinks this way: a signal must not turn the caller's own
   *   loop into an unhandled rejection that kills the process before the final flush.
   * A later close() can turn `reject` into `park`, never the other way.
   * @default 'reject'
   */
  laterWrites?: 'reject' | 'park';
}
