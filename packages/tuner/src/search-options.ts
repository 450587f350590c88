// The options every tune on the user's own store takes (the load, the target, the time it may
// take), their checks and their defaults. Each store's tune adds its own on top.
import { invalidOption } from '@spillway/core/kit';
import type { TuneTableEvent } from './search.js';
import { SHAPES } from './shapes.js';
import type { TableShape } from './table-load.js';

export interface SearchOptions {
  /** A CSV or NDJSON file of the user's records. */
  sample?: string;
  /** The sample field whose timestamps `replay` follows. */
  timestampColumn?: string;
  /** @default 'steady' (or 'replay' when timestampColumn is given) */
  shape?: TableShape;
  /** Offered records per second. @default 1000; replay: the recording's own rate */
  rate?: number;
  /** The p99 accept → durable target, ms. */
  p99Ms: number;
  /** Fraction of the target kept in reserve: a setting must reach p99 ≤ target × (1 − headroom). @default 0.25 */
  headroom?: number;
  /** Time the search may take, ms (the validation run comes on top). @default 60000 */
  budgetMs?: number;
  /** Length of one trial, ms. @default 2000 */
  trialMs?: number;
  /** Length of the validation run, ms; 0 skips it. @default 10000 */
  validateMs?: number;
  /** Validation runs at most: when one misses the target, the next cheapest setting with a lower p99 is run. @default 2 */
  validateAttempts?: number;
  /** Highest concurrency tried. @default 4 */
  maxConcurrency?: number;
  /** Tidy the scratch store up and stop on SIGINT / SIGTERM (then reject with SPILLWAY_ABORTED). @default true */
  handleSignals?: boolean;
  signal?: AbortSignal;
  onProgress?: (e: TuneTableEvent) => void;
}

/** The search options with their defaults filled in. */
export interface ResolvedSearch {
  headroom: number;
  trialMs: number;
  validateMs: number;
  validateAttempts: number;
  budgetMs: number;
  maxConcurrency: number;
}

/** Checks the options every tune shares; throws a TypeError naming the first bad one. */
export function checkSearchOptions(o: SearchOptions): ResolvedSearch {
  const positive = (name: string, v: number | undefined, min = 0, allowZero = false) => {
    if (v === undefined) return;
    if (!(typeof v === 'number' && Number.isFinite(v) && (allowZero ? v >= min : v > min)))
      throw invalidOption(name, `a finite number ${allowZero ? '>=' : '>'} ${min}`, v);
  };
  positive('p99Ms', o.p99Ms);
  if (o.p99Ms === undefined) throw invalidOption('p99Ms', 'a finite number > 0', o.p99Ms);
  positive('rate', o.rate);
  positive('trialMs', o.trialMs, 100, true);
  positive('budgetMs', o.budgetMs);
  positive('validateMs', o.validateMs, 0, true);
  positive('validateAttempts', o.validateAttempts, 1, true);
  positive('maxConcurrency', o.maxConcurrency, 1, true);
  if (o.headroom !== undefined && !(o.headroom >= 0 && o.headroom < 1))
    throw invalidOption('headroom', 'a fraction in [0, 1)', o.headroom);
  if (o.shape !== undefined && o.shape !== 'replay' && !SHAPES.includes(o.shape))
    throw invalidOption('shape', `one of ${[...SHAPES, 'replay'].join(', ')}`, o.shape);
  if (o.shape === 'replay' && o.timestampColumn === undefined)
    throw invalidOption('timestampColumn', 'the sample field to replay (shape replay)', o.timestampColumn);
  if (o.timestampColumn !== undefined && o.sample === undefined)
    throw invalidOption('sample', 'a sample file holding the timestamp column', o.sample);
  return {
    headroom: o.headroom ?? 0.25,
    trialMs: o.trialMs ?? 2000,
    validateMs: o.validateMs ?? 10_000,
    validateAttempts: Math.floor(o.validateAttempts ?? 2),
    budgetMs: o.budgetMs ?? 60_000,
    maxConcurrency: Math.floor(o.maxConcurrency ?? 4),
  };
}
