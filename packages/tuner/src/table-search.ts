// Which settings a table tune tries, and how it picks one. Pure functions over measurements, so
// that the choice can be tested without a store.
import type { Settings } from './cell-spec.js';
import type { TableTrial, WriteSums } from './table-trial.js';

/** The store's write cost, fitted over every write of the search: ms = fixedMs + perRecordMs · records. */
export interface WriteCost {
  fixedMs: number;
  perRecordMs: number;
  writes: number;
}

/** A trial with the verdict of the search. */
export interface RankedTrial extends TableTrial {
  /** Records scheduled for the trial (what the load should have offered). */
  scheduled: number;
  /**
   * Estimated highest rate the setting sustains, records/s: full batches of maxRecords back to
   * back on `concurrency` connections at the fitted write cost (an upper bound: it assumes
   * concurrent writes do not slow each other and the engine costs nothing).
   */
  ceiling: number;
  meets: boolean;
  /** Why it does not meet the target, when it does not. */
  why: string[];
}

/** 1, 2 or 5 times a power of ten, the nearest to `v` (at least 1). */
export function niceNumber(v: number): number {
  if (!(v > 1)) return 1;
  const p = 10 ** Math.floor(Math.log10(v));
  const steps = [1, 2, 5, 10].map((m) => m * p);
  return steps.reduce((best, s) => (Math.abs(Math.log(s / v)) < Math.abs(Math.log(best / v)) ? s : best));
}

/**
 * The first round: maxAgeMs at a tenth, a quarter and a half of the target, and for each, maxRecords
 * at a quarter, once and four times what arrives at the rate in one maxAgeMs (so a batch leaves
 * by size, by size about when its age comes, or by age). idleMs follows maxAgeMs (no earlier idle
 * flush) and concurrency is 1; the second round varies those two.
 */
export function firstRound(p99Ms: number, rate: number): Settings[] {
  const ages = [...new Set([p99Ms / 10, p99Ms / 4, p99Ms / 2].map((v) => Math.max(1, Math.round(v))))];
  const out: Settings[] = [];
  const seen = new Set<string>();
  for (const maxAgeMs of ages) {
    const fill = (rate * maxAgeMs) / 1000;
    for (const f of [0.25, 1, 4]) {
      const maxRecords = Math.min(100_000, niceNumber(fill * f));
      const s = { maxRecords, maxAgeMs, idleMs: maxAgeMs, concurrency: 1 };
      const k = settingsKey(s);
      if (!seen.has(k)) {
        seen.add(k);
        out.push(s);
      }
    }
  }
  return out;
}

/** The second round around the best settings of the first: more connections, and an earlier idle flush. */
export function secondRound(best: Settings[], maxConcurrency: number, tried: Set<string>): Settings[] {
  const out: Settings[] = [];
  for (const b of best) {
    const variants: Settings[] = [
      { ...b, concurrency: Math.min(2, maxConcurrency) },
      { ...b, concurrency: Math.min(4, maxConcurrency) },
      { ...b, idleMs: Math.max(1, Math.round(b.maxAgeMs / 5)) },
    ];
    for (const v of variants) {
      const k = settingsKey(v);
      if (tried.has(k)) continue;
      tried.add(k);
      out.push(v);
    }
  }
  return out;
}

export function settingsKey(s: Settings): string {
  return `${s.maxRecords}/${s.maxAgeMs}/${s.idleMs}/${s.concurrency}`;
}

/** Least squares over the writes' sums; both terms kept at zero or above. */
export function fitWriteCost(all: WriteSums[]): WriteCost {
  const t = all.reduce(
    (a, s) => ({
      count: a.count + s.count,
      records: a.records + s.records,
      ms: a.ms + s.ms,
      recordsSq: a.recordsSq + s.recordsSq,
      recordsMs: a.recordsMs + s.recordsMs,
    }),
    { count: 0, records: 0, ms: 0, recordsSq: 0, recordsMs: 0 },
  );
  if (t.count === 0) return { fixedMs: 0, perRecordMs: 0, writes: 0 };
  const meanN = t.records / t.count;
  const meanMs = t.ms / t.count;
  const varN = t.recordsSq / t.count - meanN * meanN;
  const cov = t.recordsMs / t.count - meanN * meanMs;
  let b = varN > 1e-9 ? cov / varN : meanMs / Math.max(1, meanN);
  if (b < 0) b = 0;
  let a = meanMs - b * meanN;
  if (a < 0) {
    a = 0;
    b = t.ms / Math.max(1, t.records);
  }
  return { fixedMs: a, perRecordMs: b, writes: t.count };
}

/** The estimated ceiling of a setting under a write cost, records/s. */
export function ceilingOf(s: Settings, cost: WriteCost): number {
  const ms = cost.fixedMs + cost.perRecordMs * s.maxRecords;
  if (ms <= 0) return Number.POSITIVE_INFINITY;
  return Math.round(((s.concurrency * s.maxRecords) / ms) * 1000);
}

/**
 * Judges every trial: it meets the target when its p99 is within the aim (the target less the
 * headroom), every offered record landed, none was stuck or refused, the load was not held back
 * (offered ≥ 95 % of scheduled), and its estimated ceiling is at least the rate plus the headroom.
 */
export function judge(
  trials: (TableTrial & { scheduled: number })[],
  cost: WriteCost,
  target: { p99Ms: number; headroom: number; rate: number },
): RankedTrial[] {
  const aim = target.p99Ms * (1 - target.headroom);
  return trials.map((t) => {
    const ceiling = ceilingOf(t.settings, cost);
    const why: string[] = [];
    if (t.p99Ms > aim) why.push(`p99 ${t.p99Ms} ms > ${round1(aim)} ms`);
    if (t.stuck > 0) why.push(`${t.stuck} record(s) not durable after the grace period`);
    if (t.deadLettered > 0) why.push(`${t.deadLettered} record(s) refused by the store`);
    if (t.offered < 0.95 * t.scheduled)
      why.push(`held the load back (${t.offered} of ${t.scheduled} offered)`);
    if (ceiling < target.rate * (1 + target.headroom))
      why.push(
        `estimated ceiling ${ceiling}/s < rate + headroom ${Math.round(target.rate * (1 + target.headroom))}/s`,
      );
    return { ...t, ceiling, meets: why.length === 0, why };
  });
}

/**
 * The recommendation: of the trials that meet the target, the one with the least store time per
 * record; within 5 % of that, fewer store writes per second, then the lower p99.
 */
export function recommend(ranked: RankedTrial[]): RankedTrial | undefined {
  return [...ranked].filter((t) => t.meets).sort(byCost)[0];
}

export function byCost(a: RankedTrial, b: RankedTrial): number {
  const top = Math.max(a.storeMsPerRecord, b.storeMsPerRecord, 1e-9);
  if (Math.abs(a.storeMsPerRecord - b.storeMsPerRecord) / top > 0.05)
    return a.storeMsPerRecord - b.storeMsPerRecord;
  if (a.writesPerSecond !== b.writesPerSecond) return a.writesPerSecond - b.writesPerSecond;
  return a.p99Ms - b.p99Ms;
}

const round1 = (n: number) => Math.round(n * 10) / 10;
