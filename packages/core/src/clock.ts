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

interface ManualTimer {
  at: number;
  seq: number;
  fn: () => void;
}

/**
 * A clock for tests: time moves only when `advance()` is called; due timers fire in order, and
 * promise callbacks run between timers so async code settles as it would in real time.
 */
export class ManualClock implements Clock {
  private t = 0;
  private seq = 0;
  private timers = new Map<number, ManualTimer>();

  constructor(
    start = 0,
    private readonly epoch = 1_700_000_000_000,
  ) {
    this.t = start;
  }

  now(): number {
    return this.t;
  }

  wallNow(): number {
    return this.epoch + this.t;
  }

  setTimeout(fn: () => void, ms: number): unknown {
    const id = ++this.seq;
    this.timers.set(id, { at: this.t + Math.max(0, ms), seq: id, fn });
    return id;
  }

  clearTimeout(handle: unknown): void {
    this.timers.delete(handle as number);
  }

  /** Number of armed timers; the engine promises at most one flush timer. */
  get pendingTimers(): number {
    return this.timers.size;
  }

  /** Moves time forward by `ms`, firing due timers in order and letting promises settle. */
  async advance(ms: number): Promise<void> {
    const end = this.t + ms;
    await settle();
    for (;;) {
      let next: ManualTimer | undefined;
      for (const timer of this.timers.values()) {
        if (
          timer.at <= end &&
          (!next || timer.at < next.at || (timer.at === next.at && timer.seq < next.seq))
        ) {
          next = timer;
        }
      }
      if (!next) break;
      this.timers.delete(next.seq);
      this.t = Math.max(this.t, next.at);
      next.fn();
      await settle();
    }
    this.t = end;
    await settle();
  }
}

/** Lets queued promise callbacks run (several macrotask turns). */
export async function settle(turns = 5): Promise<void> {
  for (let i = 0; i < turns; i++) await new Promise<void>((resolve) => setImmediate(resolve));
}
