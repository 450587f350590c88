// One trial on the scratch store (a copy of the user's table, scratch Redis keys, a scratch topic):
// a sink with one setting, fed the user's records at the user's rate and shape, measured from the
// sink's own events.
import { type DeadLetterTarget, type RecordMeta, Sink, type SinkAdapter } from '@spillway/core';
import { Histogram } from '@spillway/core/kit';
import type { Settings } from './cell-spec.js';
import { round } from './numbers.js';

const sleep = (ms: number) => new Promise<void>((resolve) => setTimeout(resolve, ms));

/** Sums over the store writes of a trial, for the write-cost line `ms = a + b · records`. */
export interface WriteSums {
  count: number;
  records: number;
  ms: number;
  recordsSq: number;
  recordsMs: number;
}

export interface TableTrial {
  settings: Settings;
  /** Records handed to the sink during the trial. */
  offered: number;
  /** Offered records per second over the trial. */
  offeredRate: number;
  durable: number;
  deadLettered: number;
  /** Not terminal when the grace period ended; counted in p99 at their age. */
  stuck: number;
  /** Durable records per second of load. */
  throughput: number;
  p50Ms: number;
  /** p99 accept → durable, stuck records counted at their age. */
  p99Ms: number;
  maxMs: number;
  /** Store writes (batches) per second of load. */
  writesPerSecond: number;
  /** Mean records per store write. */
  meanBatch: number;
  /** Store time per durable record: the sum of write durations over the records written, ms. */
  storeMsPerRecord: number;
  /** p99 of one store write, ms. */
  writeP99Ms: number;
  /** Time `write()` waited for room in the sink (backpressure), ms, summed. */
  backpressureMs: number;
  sums: WriteSums;
  /** The first store error of a dead-lettered record (SQLSTATE and message; never row contents). */
  firstError?: string;
}

export interface TrialRun<T> {
  adapter: SinkAdapter<T>;
  /** The records, handed out one after another. */
  cycle: { next(): T };
  settings: Settings;
  /** Arrival times, ms from the start, in order. */
  schedule: Iterable<number>;
  durationMs: number;
  signal?: AbortSignal;
  /** The sink's `orderingKey`, when the user's sink will set one (records of a key are never in flight twice). */
  orderingKey?: ((record: T) => string | undefined) | undefined;
}

/** Keeps the first dead letter's error code and message, never the record. */
class FirstError<T> implements DeadLetterTarget<T> {
  first: string | undefined;
  async write(letters: readonly { error: unknown }[]): Promise<void> {
    if (this.first === undefined && letters[0]) {
      const e = letters[0].error as { driverCode?: string; message?: string } | undefined;
      this.first = `${e?.driverCode ? `${e.driverCode} ` : ''}${e?.message ?? String(e)}`;
    }
  }
}

/** Runs one trial and measures it. */
export async function runTableTrial<T>(run: TrialRun<T>): Promise<TableTrial> {
  const s = run.settings;
  const dead = new FirstError<T>();
  const sink = new Sink(run.adapter, {
    name: 'tune',
    maxRecords: s.maxRecords,
    maxAgeMs: s.maxAgeMs,
    idleMs: s.idleMs,
    concurrency: s.concurrency,
    deadLetter: dead,
    // A trial must not sit out a long outage: it measures, it does not keep data.
    retry: { maxAttempts: 3, maxElapsedMs: 5000 },
    ...(run.orderingKey ? { orderingKey: run.orderingKey } : {}),
  });
  const latency = new Histogram(1000);
  const writeTimes = new Histogram(1000);
  const sums: WriteSums = { count: 0, records: 0, ms: 0, recordsSq: 0, recordsMs: 0 };
  const held = new Map<RecordMeta, number>();
  let durable = 0;
  let deadSettled = 0;
  let backpressureMs = 0;
  sink.on('written', (e) => {
    writeTimes.record(e.durationMs);
    sums.count++;
    sums.records += e.records;
    sums.ms += e.durationMs;
    sums.recordsSq += e.records * e.records;
    sums.recordsMs += e.records * e.durationMs;
  });
  // Set at the end of the grace period: what settles while the sink closes is not measured.
  let cutOff = false;
  sink.on('settled', (e) => {
    if (cutOff) return;
    for (let i = 0; i < e.metas.length; i++) {
      const m = e.metas[i];
      if (m) held.delete(m);
      if (e.outcome === 'durable') latency.record(e.latenciesMs[i] ?? 0);
    }
    if (e.outcome === 'durable') durable += e.metas.length;
    else deadSettled += e.metas.length;
  });
  sink.on('backpressure', (e) => (backpressureMs += e.waitedMs));

  const start = performance.now();
  let offered = 0;
  let sinceYield = 0;
  for (const at of run.schedule) {
    if (run.signal?.aborted) break;
    let now = performance.now() - start;
    if (now >= run.durationMs) break; // behind schedule at the end: the rest is not offered
    if (at > now + 0.5) {
      await sleep(at - now);
      sinceYield = 0;
      now = performance.now() - start;
    }
    const meta: RecordMeta = {};
    const row = run.cycle.next();
    held.set(meta, performance.now());
    if (!sink.tryWrite(row, meta)) {
      const accepted = await sink.write(row, meta, run.signal ? { signal: run.signal } : undefined).then(
        () => true,
        () => false, // cancelled by the signal: not accepted
      );
      sinceYield = 0;
      if (!accepted) {
        held.delete(meta);
        break;
      }
    }
    offered++;
    if (++sinceYield >= 256) {
      sinceYield = 0;
      await new Promise<void>((resolve) => setImmediate(resolve));
    }
  }
  const loadEnd = performance.now();
  // The last records leave by age or idle flush, as they would in production; wait for them.
  const grace = Math.min(5000, 2 * Math.max(s.maxAgeMs, s.idleMs) + 500);
  const graceEnd = Math.max(loadEnd, start + run.durationMs) + grace;
  while (held.size > 0 && performance.now() < graceEnd && !run.signal?.aborted) await sleep(5);
  const cutoff = performance.now();
  // Counted at the cutoff: a stuck record that lands while the sink closes stays counted as stuck
  // only, so that durable + dead-lettered + stuck = offered.
  cutOff = true;
  const stuck = held.size;
  const withStuck = new Histogram(1000);
  // Rebuild p99 over every offered record: the durable ones' latencies, and each stuck one at its age.
  const durableSummary = latency.summary();
  for (const acceptedAt of held.values()) withStuck.record(cutoff - acceptedAt);
  await sink.close({ timeoutMs: 30_000 }).catch(() => undefined);

  const loadSeconds = Math.max(run.durationMs, loadEnd - start) / 1000;
  const p99 =
    stuck === 0
      ? Math.min(latency.percentile(99), durableSummary.max)
      : combinedP99(latency, withStuck, durable, stuck);
  return {
    settings: s,
    offered,
    offeredRate: round(offered / (run.durationMs / 1000), 1),
    durable,
    deadLettered: deadSettled,
    stuck,
    throughput: round(durable / loadSeconds, 1),
    p50Ms: round(Math.min(latency.percentile(50), durableSummary.max), 2),
    p99Ms: round(p99, 2),
    maxMs: round(Math.max(durableSummary.max, stuck > 0 ? withStuck.summary().max : 0), 2),
    writesPerSecond: round(sums.count / loadSeconds, 1),
    meanBatch: sums.count === 0 ? 0 : round(sums.records / sums.count, 1),
    storeMsPerRecord: sums.records === 0 ? 0 : round(sums.ms / sums.records, 5),
    writeP99Ms: round(Math.min(writeTimes.percentile(99), writeTimes.summary().max), 2),
    backpressureMs: round(backpressureMs, 1),
    sums,
    ...(dead.first !== undefined ? { firstError: dead.first } : {}),
  };
}

/**
 * p99 over durable and stuck records together. A stuck record is older than the grace period,
 * so it ranks above every durable one: the p99 is a stuck age when more than 1 % are stuck.
 */
function combinedP99(durable: Histogram, stuck: Histogram, nDurable: number, nStuck: number): number {
  const total = nDurable + nStuck;
  const rank = Math.ceil(total * 0.99);
  if (rank <= nDurable) return durable.percentile((rank / Math.max(1, nDurable)) * 100);
  return stuck.percentile(((rank - nDurable) / nStuck) * 100);
}
