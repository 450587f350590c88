// The search of a tune on the user's own store: every trial drives one adapter with the sample's
// records at the planned load. The three tunes (table, Redis keys, Kafka topic) differ only in the
// store they set up and in how a trial's leftovers are cleared.
import type { SinkAdapter } from '@spillway/core';
import type { Settings } from './cell-spec.js';
import type { Interruption } from './interrupt.js';
import { round } from './numbers.js';
import { type SearchOutcome, searchSettings } from './search.js';
import type { ResolvedSearch, SearchOptions } from './search-options.js';
import type { LoadPlan, TableShape } from './table-load.js';

export interface StoreSearch<T> {
  options: Pick<SearchOptions, 'p99Ms' | 'onProgress'>;
  search: ResolvedSearch;
  load: LoadPlan;
  /** `performance.now()` when the tune began: the budget and `elapsedMs` count from there. */
  started: number;
  stop: Interruption;
  adapter: SinkAdapter<T>;
  /** The sample's records, handed out in turn; `offset` is where the next trial's arrivals pick up. */
  cycle: { next(): T; offset: number };
  /** Clears what a trial left in the scratch store. */
  reset(): Promise<void>;
  /** The sink's `orderingKey` for a setting, when the user's sink would set one for it. */
  orderingKey?: (settings: Settings) => ((record: T) => string | undefined) | undefined;
}

/** The search's outcome with the load, the target and the time the tune took. */
export type StoreSearchOutcome = Omit<SearchOutcome, 'load'> & {
  load: { shape: TableShape; rate: number; trialMs: number };
};

/** Runs the search and its validation over the store behind `adapter`. */
export async function searchStore<T>(s: StoreSearch<T>): Promise<StoreSearchOutcome> {
  const { runTableTrial } = await import('./table-trial.js');
  const { options: o, search, load, cycle } = s;
  const found = await searchSettings({
    ...search,
    p99Ms: o.p99Ms,
    rate: load.rate,
    started: s.started,
    halt: s.stop.halt,
    onProgress: o.onProgress,
    reset: s.reset,
    trial: async (settings, durationMs, seed) => {
      const schedule = load.schedule(durationMs, seed, cycle.offset);
      const orderingKey = s.orderingKey?.(settings);
      const t = await runTableTrial({
        adapter: s.adapter,
        cycle,
        settings,
        schedule,
        durationMs,
        signal: s.stop.signal,
        ...(orderingKey !== undefined ? { orderingKey } : {}),
      });
      return { ...t, scheduled: schedule.length };
    },
  });
  return {
    load: { shape: load.shape, rate: round(load.rate, 1), trialMs: search.trialMs },
    target: { p99Ms: o.p99Ms, headroom: search.headroom, aimMs: round(o.p99Ms * (1 - search.headroom), 1) },
    ...found,
    elapsedMs: Math.round(performance.now() - s.started),
  };
}
