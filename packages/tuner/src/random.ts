/**
 * A small seeded random source, so that a load shape replays the same arrivals and keys on every
 * run. mulberry32 (a 32-bit state generator; common practice for reproducible test data, not for
 * cryptography): fast, and good enough for arrival jitter and key choice.
 */
export class SeededRandom {
  private state: number;

  constructor(seed: number) {
    // Any integer seed works; 0 is mixed like the rest.
    this.state = seed >>> 0;
  }

  /** Uniform in [0, 1). */
  next(): number {
    this.state = (this.state + 0x6d2b79f5) >>> 0;
    let t = this.state;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  }

  /** Uniform integer in [0, n). */
  int(n: number): number {
    return Math.floor(this.next() * n);
  }

  /**
   * Exponentially distributed with the given mean: the gap between arrivals of a Poisson process
   * (inverse-CDF sampling, -mean·ln(1-u)).
   */
  exponential(mean: number): number {
    return -mean * Math.log(1 - this.next());
  }
}
