/**
 * `@spillway/core/testing`: what tests of the engine, and of code built on it, share. Time that
 * moves only when told to, a way to let queued promise callbacks run, and in-memory adapters.
 */
export type { Call } from './fake-adapters.js';
export {
  BadRecord,
  deferred,
  FakeAdapter,
  MemoryAdapter,
  MemoryDeadLetter,
  Misconfigured,
  Transient,
} from './fake-adapters.js';
export { ManualClock, settle } from './manual-clock.js';
