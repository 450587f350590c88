import type { Clock } from './clock.js';

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
