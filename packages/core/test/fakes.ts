import type {
  Batch,
  DeadLetter,
  DeadLetterTarget,
  ErrorClass,
  PartialWrite,
  SinkAdapter,
} from '../src/index.js';
import { ManualClock, Sink } from '../src/index.js';

/** A transient error as a store would raise it. */
export class Transient extends Error {
  readonly code = 'TRANSIENT';
}
/** A bad-data error for one record. */
export class BadRecord extends Error {
  readonly code = 'BAD';
}
export class Misconfigured extends Error {
  readonly code = 'FATAL';
}

export interface Call<T> {
  records: T[];
  reason: string;
  attempt: number;
  startedAt: number;
}

/**
 * An in-memory adapter for unit tests of the engine's own logic. `behave` decides, per call, what
 * the write does; by default it succeeds at once.
 */
export class FakeAdapter<T> implements SinkAdapter<T> {
  readonly kind = 'fake';
  readonly calls: Call<T>[] = [];
  readonly stored: T[] = [];
  inFlight = 0;
  maxInFlight = 0;
  behave: (batch: Batch<T>, call: number) => Promise<void | PartialWrite> | void | PartialWrite = () => {};
  now: () => number = () => 0;

  async write(batch: Batch<T>): Promise<void | PartialWrite> {
    this.calls.push({
      records: [...batch.records],
      reason: batch.reason,
      attempt: batch.attempt,
      startedAt: this.now(),
    });
    this.inFlight++;
    this.maxInFlight = Math.max(this.maxInFlight, this.inFlight);
    try {
      const out = await this.behave(batch, this.calls.length);
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

/** A small seeded PRNG (mulberry32) so randomised unit tests repeat. */
export function seeded(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

/**
 * A sink over a FakeAdapter whose every write waits until the test resolves its gate: 2 records a
 * batch, 4 pending at most.
 */
export function gatedSink(options: Record<string, unknown> = {}) {
  const clock = new ManualClock();
  const adapter = new FakeAdapter<number>();
  const gates: Array<ReturnType<typeof deferred>> = [];
  adapter.behave = () => {
    const g = deferred();
    gates.push(g);
    return g.promise;
  };
  const sink = new Sink(adapter, {
    maxRecords: 2,
    maxPendingRecords: 4,
    maxAgeMs: 100,
    idleMs: 0,
    clock,
    ...options,
  });
  return { clock, adapter, sink, gates };
}
