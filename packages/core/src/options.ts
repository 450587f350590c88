import type { Clock } from './clock.js';
import { systemClock } from './clock.js';
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
   * Bound on estimated bytes accepted but not yet terminal. Must be at least `maxBytes`.
   * @default maxBytes × (concurrency + 2)
   */
  maxPendingBytes?: number;
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
  retry: { maxAttempts: 12, baseDelayMs: 100, maxDelayMs: 5000, maxElapsedMs: 120_000 },
} as const;

/** The error thrown for a bad option: names the option, what was expected and what was given. */
export function invalidOption(name: string, expected: string, given: unknown): TypeError {
  const error = new TypeError(`Expected \`${name}\` to be ${expected}, got \`${show(given)}\``);
  (error as TypeError & { code: string }).code = 'SPILLWAY_INVALID_OPTION';
  return error;
}

function show(value: unknown): string {
  if (typeof value === 'string') return JSON.stringify(value);
  if (typeof value === 'function') return 'function';
  if (typeof value === 'bigint') return `${value}n`;
  if (typeof value === 'number') return String(value);
  try {
    return String(JSON.stringify(value) ?? value);
  } catch {
    return String(value);
  }
}

/** A finite number with bounds; integers when `integer`. Returns the default when undefined. */
export function numberOption(
  name: string,
  value: unknown,
  fallback: number,
  rule: { min: number; exclusiveMin?: boolean; integer?: boolean; allowInfinity?: boolean },
): number {
  if (value === undefined) return fallback;
  const { min, exclusiveMin = false, integer = false, allowInfinity = false } = rule;
  const kind = integer ? 'an integer' : 'a finite number';
  const bound = `${exclusiveMin ? '>' : '>='} ${min}`;
  const ok =
    typeof value === 'number' &&
    !Number.isNaN(value) &&
    (Number.isFinite(value) || (allowInfinity && value === Number.POSITIVE_INFINITY)) &&
    (!integer || Number.isInteger(value) || value === Number.POSITIVE_INFINITY) &&
    (exclusiveMin ? value > min : value >= min);
  if (!ok) throw invalidOption(name, `${kind} ${bound}${allowInfinity ? ' (or Infinity)' : ''}`, value);
  return value as number;
}

function functionOption<F>(name: string, value: unknown): F | undefined {
  if (value === undefined) return undefined;
  if (typeof value !== 'function') throw invalidOption(name, 'a function', value);
  return value as F;
}

const KNOWN = new Set([
  'name',
  'maxRecords',
  'maxBytes',
  'maxAgeMs',
  'idleMs',
  'concurrency',
  'maxPendingRecords',
  'maxPendingBytes',
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
  return meta.topic === undefined ? String(meta.partition) : `${meta.topic}:${meta.partition}`;
}

/** Applies defaults and validates; throws a `TypeError` naming the first bad option. */
export function resolveOptions<T>(
  options: SinkOptions<T> | undefined,
  adapterKind: string,
): ResolvedOptions<T> {
  const o = (options ?? {}) as Record<string, unknown>;
  if (typeof o !== 'object' || o === null) throw invalidOption('options', 'an object', options);
  for (const key of Object.keys(o)) {
    if (!KNOWN.has(key) && o[key] !== undefined)
      throw invalidOption(key, `one of the known options (${[...KNOWN].join(', ')})`, o[key]);
  }
  const name = o.name === undefined ? adapterKind : o.name;
  if (typeof name !== 'string' || name.length === 0)
    throw invalidOption('name', 'a non-empty string', o.name);

  const maxRecords = numberOption('maxRecords', o.maxRecords, DEFAULTS.maxRecords, { min: 1, integer: true });
  const maxBytes = numberOption('maxBytes', o.maxBytes, DEFAULTS.maxBytes, { min: 1, integer: true });
  const maxAgeMs = numberOption('maxAgeMs', o.maxAgeMs, DEFAULTS.maxAgeMs, { min: 0, exclusiveMin: true });
  const idleMs = numberOption('idleMs', o.idleMs, DEFAULTS.idleMs, { min: 0 });
  const concurrency = numberOption('concurrency', o.concurrency, DEFAULTS.concurrency, {
    min: 1,
    integer: true,
  });
  const maxPendingRecords = numberOption(
    'maxPendingRecords',
    o.maxPendingRecords,
    maxRecords * (concurrency + 2),
    {
      min: 1,
      integer: true,
    },
  );
  if (maxPendingRecords < maxRecords) {
    throw invalidOption(
      'maxPendingRecords',
      `an integer >= maxRecords (${maxRecords}), a bound of at least one batch`,
      maxPendingRecords,
    );
  }
  const maxPendingBytes = numberOption('maxPendingBytes', o.maxPendingBytes, maxBytes * (concurrency + 2), {
    min: 1,
    integer: true,
  });
  if (maxPendingBytes < maxBytes) {
    throw invalidOption(
      'maxPendingBytes',
      `an integer >= maxBytes (${maxBytes}), a bound of at least one batch`,
      maxPendingBytes,
    );
  }

  const r = (o.retry ?? {}) as Record<string, unknown>;
  if (typeof r !== 'object' || r === null) throw invalidOption('retry', 'an object', o.retry);
  const retry = {
    maxAttempts: numberOption('retry.maxAttempts', r.maxAttempts, DEFAULTS.retry.maxAttempts, {
      min: 1,
      integer: true,
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
    orderingKey: functionOption('orderingKey', o.orderingKey) ?? defaultOrderingKey,
    estimateBytes: functionOption('estimateBytes', o.estimateBytes),
    retry,
    deadLetter,
    clock,
  };
}
