import { Sink } from '../src/index.js';
import { deferred, FakeAdapter, ManualClock } from '../src/testing.js';

export type { Call } from '../src/testing.js';
export {
  BadRecord,
  deferred,
  FakeAdapter,
  MemoryDeadLetter,
  Misconfigured,
  Transient,
} from '../src/testing.js';

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
  const gates: Array<ReturnType<typeof deferred<void>>> = [];
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
