/**
 * The engine reads time only through a `Clock`, so unit tests can drive time by hand.
 */
export interface Clock {
  /** Monotonic milliseconds (any origin). */
  now(): number;
  /** Wall-clock milliseconds since the epoch, for event-time latency and dead-letter stamps. */
  wallNow(): number;
  /**
   * The engine sets timers only while records are pending (see `systemClock`). A clock whose
   * timers do not keep the process alive leaves that to the sink's `beforeExit` flush.
   */
  setTimeout(fn: () => void, ms: number): unknown;
  clearTimeout(handle: unknown): void;
}

export const systemClock: Clock = {
  now: () => performance.now(),
  wallNow: () => Date.now(),
  // Referenced on purpose: the engine sets a timer only while records are pending (the flush
  // timer while records are buffered, a retry back-off while a batch waits to be written again,
  // close()'s deadline while it waits), so the timer is what keeps a program whose input ended
  // alive until those records are durable. An idle sink holds no timer and never keeps a process up.
  setTimeout: (fn, ms) => setTimeout(fn, ms),
  clearTimeout: (handle) => clearTimeout(handle as NodeJS.Timeout),
};

/** Waits `ms` on the given clock. */
export function sleep(clock: Clock, ms: number): Promise<void> {
  return new Promise((resolve) => {
    clock.setTimeout(resolve, ms);
  });
}
