// The search every tune on the user's own store runs, whatever the store: a warm-up, a first round
// of maxRecords × maxAgeMs, a second round of concurrency and idleMs around the best, the
// recommendation, and the validation runs. The store side comes in as `trial` and `reset`.
import type { Settings } from './cell-spec.js';
import { round } from './numbers.js';
import {
  byCost,
  firstRound,
  fitWriteCost,
  judge,
  type RankedTrial,
  recommend,
  secondRound,
  settingsKey,
  type WriteCost,
} from './table-search.js';
import type { TableTrial } from './table-trial.js';

/** One validation run of a recommended setting. */
export interface Validation {
  durationMs: number;
  trial: TableTrial & { scheduled: number };
  holds: boolean;
  why: string[];
}

/** What a tune reports as it runs (the same events for a table, Redis keys or a Kafka topic). */
export type TuneTableEvent =
  | { kind: 'plan'; trials: number; estimateMs: number; validateMs: number }
  | { kind: 'note'; text: string }
  | { kind: 'trial'; done: number; total: number; trial: TableTrial; round: 1 | 2 }
  | { kind: 'validate'; durationMs: number; settings: Settings };

/** The figures every tune outcome carries, whatever it ran on. */
export interface SearchOutcome {
  load: { shape: string; rate: number; trialMs: number };
  target: { p99Ms: number; headroom: number; aimMs: number };
  writeCost: WriteCost;
  trials: RankedTrial[];
  recommended?: RankedTrial;
  /** The last validation run: of `recommended`. */
  validation?: Validation;
  /** Every validation run, in order: a pick that missed, then the next cheapest with a lower p99. */
  validations?: Validation[];
  elapsedMs: number;
}

export interface SearchSpec {
  p99Ms: number;
  headroom: number;
  rate: number;
  trialMs: number;
  validateMs: number;
  validateAttempts: number;
  budgetMs: number;
  maxConcurrency: number;
  /** `performance.now()` when the tune began: the budget counts from there. */
  started: number;
  /** Runs one trial of a setting; the seed varies the load's random parts. */
  trial(settings: Settings, durationMs: number, seed: number): Promise<TableTrial & { scheduled: number }>;
  /** Empties the scratch store between trials. */
  reset(): Promise<void>;
  /** Throws when the tune was interrupted. */
  halt(): void;
  onProgress?: ((e: TuneTableEvent) => void) | undefined;
}

const OVERHEAD_MS = 400;

const sameSettings = (a: Settings, b: Settings) =>
  a.maxRecords === b.maxRecords &&
  a.maxAgeMs === b.maxAgeMs &&
  a.idleMs === b.idleMs &&
  a.concurrency === b.concurrency;

/** Runs the search and the validation; the caller adds what it ran on. */
export async function searchSettings(
  spec: SearchSpec,
): Promise<Pick<SearchOutcome, 'writeCost' | 'trials' | 'recommended' | 'validation' | 'validations'>> {
  const { trial, reset, halt, trialMs, budgetMs, rate, validateMs } = spec;
  // A short run first, so that connection setup and the first plans are not charged to a trial.
  await trial({ maxRecords: 100, maxAgeMs: 50, idleMs: 50, concurrency: 1 }, Math.min(500, trialMs), 99);
  await reset();

  const estimate = (s: Settings) =>
    trialMs + Math.min(5000, 2 * Math.max(s.maxAgeMs, s.idleMs)) / 4 + OVERHEAD_MS;
  let round1 = firstRound(spec.p99Ms, rate);
  // Over budget: drop the smallest batches first (they cost the store the most), then the ages.
  while (round1.length > 2 && round1.reduce((a, s) => a + estimate(s), 0) > budgetMs * 0.7) {
    const smallest = round1.reduce((m, s) => (s.maxRecords < m.maxRecords ? s : m));
    round1 = round1.filter((s) => s !== smallest);
  }
  const round2Max = Math.max(
    0,
    Math.floor((budgetMs - round1.reduce((a, s) => a + estimate(s), 0)) / (trialMs + OVERHEAD_MS)),
  );
  const round2Planned = Math.min(6, round2Max);
  const planned = round1.length + round2Planned;
  spec.onProgress?.({
    kind: 'plan',
    trials: planned,
    estimateMs: Math.round(
      round1.reduce((a, s) => a + estimate(s), 0) + round2Planned * (trialMs + OVERHEAD_MS),
    ),
    validateMs,
  });

  const done: (TableTrial & { scheduled: number })[] = [];
  const tried = new Set<string>();
  let total = planned;
  for (const s of round1) {
    halt();
    tried.add(settingsKey(s));
    const t = await trial(s, trialMs, done.length + 1);
    halt();
    done.push(t);
    spec.onProgress?.({ kind: 'trial', done: done.length, total, trial: t, round: 1 });
    await reset();
  }
  const target = { p99Ms: spec.p99Ms, headroom: spec.headroom, rate };
  let ranked = judge(done, fitWriteCost(done.map((t) => t.sums)), target);
  const passing = ranked.filter((t) => t.meets).sort(byCost);
  const seeds = (passing.length > 0 ? passing : [...ranked].sort((a, b) => a.p99Ms - b.p99Ms))
    .slice(0, 2)
    .map((t) => t.settings);
  const round2 = secondRound(seeds, spec.maxConcurrency, tried).slice(0, round2Planned);
  total = round1.length + round2.length;
  for (const s of round2) {
    if (performance.now() - spec.started > budgetMs + trialMs) break;
    halt();
    const t = await trial(s, trialMs, done.length + 1);
    halt();
    done.push(t);
    spec.onProgress?.({ kind: 'trial', done: done.length, total, trial: t, round: 2 });
    await reset();
  }
  const writeCost = fitWriteCost(done.map((t) => t.sums));
  ranked = judge(done, writeCost, target);
  let best = recommend(ranked);

  // The validation: the pick once more, for longer. When it misses, the next cheapest setting
  // that met the aim with a lower p99 gets its own run, up to `validateAttempts` runs in all.
  const validations: Validation[] = [];
  if (best && validateMs > 0) {
    let candidate: RankedTrial | undefined = best;
    while (candidate && validations.length < spec.validateAttempts) {
      halt();
      await reset();
      spec.onProgress?.({ kind: 'validate', durationMs: validateMs, settings: candidate.settings });
      const v = await trial(candidate.settings, validateMs, 7777 + validations.length);
      halt();
      const why: string[] = [];
      if (v.p99Ms > spec.p99Ms) why.push(`p99 ${v.p99Ms} ms > target ${spec.p99Ms} ms`);
      if (v.stuck > 0) why.push(`${v.stuck} record(s) not durable after the grace period`);
      if (v.deadLettered > 0) why.push(`${v.deadLettered} record(s) refused by the store`);
      if (v.offered < 0.95 * v.scheduled)
        why.push(`held the load back (${v.offered} of ${v.scheduled} offered)`);
      validations.push({ durationMs: validateMs, trial: v, holds: why.length === 0, why });
      best = candidate;
      if (why.length === 0) break;
      const missed: RankedTrial = candidate;
      candidate = ranked
        .filter(
          (t) =>
            t.meets &&
            t.p99Ms < missed.p99Ms &&
            !validations.some((w) => sameSettings(w.trial.settings, t.settings)),
        )
        .sort(byCost)[0];
    }
  }
  const validation = validations[validations.length - 1];
  return {
    writeCost: {
      fixedMs: round(writeCost.fixedMs, 4),
      perRecordMs: round(writeCost.perRecordMs, 5),
      writes: writeCost.writes,
    },
    trials: ranked,
    ...(best ? { recommended: best } : {}),
    ...(validation ? { validation, validations } : {}),
  };
}
