/**
 * Adapters and a dead-letter target that keep everything in memory, for unit tests of the engine's
 * own logic and of code built on it (ingest, exporters). Tests of a store adapter talk to the real
 * store instead.
 */
import type { Batch, DeadLetter, DeadLetterTarget, ErrorClass, PartialWrite, SinkAdapter } from './types.js';

/** A transient error as a store would raise it: `FakeAdapter` classifies it `retry`. */
export class Transient extends Error {
  readonly code = 'TRANSIENT';
}
/** A bad-data error for one record: `FakeAdapter` classifies it `split`. */
export class BadRecord extends Error {
  readonly code = 'BAD';
}
/** A misconfiguration: `FakeAdapter` classifies it (and any other error) `fatal`. */
export class Misconfigured extends Error {
  readonly code = 'FATAL';
}

/** One `write()` a `FakeAdapter` received. */
export interface Call<T> {
  records: T[];
  reason: string;
  attempt: number;
  startedAt: number;
}

/**
 * An adapter whose every write the test scripts: `behave(batch, call)` decides what the write does
 * (resolve, return a `PartialWrite`, throw `Transient` / `BadRecord` / `Misconfigured`, or hold a
 * promise open); by default it succeeds at once. Records of successful writes land in `stored`.
 */
export class FakeAdapter<T> implements SinkAdapter<T> {
  readonly kind = 'fake';
  readonly calls: Call<T>[] = [];
  readonly stored: T[] = [];
  inFlight = 0;
  maxInFlight = 0;
  // biome-ignore lint/suspicious/noConfusingVoidType: a scripted write that lands everything returns nothing, like an adapter's write()
  behave: (batch: Batch<T>, call: number) => Promise<PartialWrite | void> | PartialWrite | void = () => {};
  /** Set to observe the sink closing its adapter. */
  close?: () => Promise<void>;
  /** The time stamped on each call (tests pass their ManualClock's). */
  now: () => number = () => 0;

  async write(batch: Batch<T>): Promise<PartialWrite | undefined> {
    this.calls.push({
      records: [...batch.records],
      reason: batch.reason,
      attempt: batch.attempt,
      startedAt: this.now(),
    });
    this.inFlight++;
    this.maxInFlight = Math.max(this.maxInFlight, this.inFlight);
    try {
      const out = (await this.behave(batch, this.calls.length)) ?? undefined;
      const rejected = new Set(out?.rejected.map((r) => r.index) ?? []);
      batch.records.forEach((r, i) => {
        if (!rejected.has(i)) this.stored.push(r);
      });
      return out;
    } finally {
      this.inFlight--;
    }
  }

  classify(error: unknown): ErrorClass {
    if (error instanceof Transient) return 'retry';
    if (error instanceof BadRecord) return 'split';
    return 'fatal';
  }
}

/**
 * A store in memory: keeps what it is given (with its metadata), refuses the records `refuse`
 * picks as a `PartialWrite` (classified `split`, so they are dead-lettered one by one), and can
 * take `delayMs` per write.
 */
export class MemoryAdapter<T> implements SinkAdapter<T> {
  readonly kind = 'memory';
  readonly stored: T[] = [];
  readonly metas: Array<Batch<T>['metas'][number]> = [];
  batches = 0;
  /** Records the store refuses. */
  refuse: (record: T) => boolean = () => false;
  /** Keep nothing (for memory measurements on large inputs). */
  discard = false;
  delayMs = 0;

  async write(batch: Batch<T>): Promise<PartialWrite | undefined> {
    this.batches++;
    if (this.delayMs > 0) await new Promise((r) => setTimeout(r, this.delayMs));
    const rejected: Array<{ index: number; error: unknown }> = [];
    batch.records.forEach((r, i) => {
      if (this.refuse(r)) rejected.push({ index: i, error: new RangeError('refused by the memory store') });
      else if (!this.discard) {
        this.stored.push(r);
        this.metas.push(batch.metas[i]);
      }
    });
    return rejected.length > 0 ? { rejected } : undefined;
  }

  classify(error: unknown): ErrorClass {
    return error instanceof RangeError ? 'split' : 'fatal';
  }
}

/** A dead-letter target that keeps the letters in `letters`. */
export class MemoryDeadLetter<T> implements DeadLetterTarget<T> {
  readonly letters: DeadLetter<T>[] = [];
  async write(letters: readonly DeadLetter<T>[]): Promise<void> {
    this.letters.push(...letters);
  }
}

/** A promise with its resolve/reject outside, for holding a write open. */
export function deferred<T = void>(): { promise: Promise<T>; resolve(v: T): void; reject(e: unknown): void } {
  let resolve!: (v: T) => void;
  let reject!: (e: unknown) => void;
  const promise = new Promise<T>((res, rej) => {
    resolve = res;
    reject = rej;
  });
  return { promise, resolve, reject };
}
