import { describe, expect, it } from 'vitest';
import { fullJitterDelay } from '../src/engine/delivery.js';

describe('full-jitter backoff', () => {
  // Source: "Exponential Backoff And Jitter", AWS Architecture Blog (2015):
  //   sleep = random_between(0, min(cap, base * 2 ** attempt))
  const base = 100;
  const cap = 5000;

  it('is uniform between 0 and min(cap, base·2^attempt)', () => {
    for (let attempt = 0; attempt < 12; attempt++) {
      const ceiling = Math.min(cap, base * 2 ** attempt);
      expect(fullJitterDelay(attempt, base, cap, () => 0)).toBe(0);
      expect(fullJitterDelay(attempt, base, cap, () => 0.5)).toBe(ceiling / 2);
      expect(fullJitterDelay(attempt, base, cap, () => 0.999999)).toBeCloseTo(ceiling, 1);
    }
  });

  it('spreads delays over the whole interval (mean ≈ ceiling / 2)', () => {
    const n = 20_000;
    let sum = 0;
    let max = 0;
    for (let i = 0; i < n; i++) {
      const d = fullJitterDelay(3, base, cap);
      sum += d;
      max = Math.max(max, d);
    }
    expect(max).toBeLessThanOrEqual(800);
    expect(sum / n).toBeGreaterThan(360);
    expect(sum / n).toBeLessThan(440);
  });

  it('stays at the cap however many attempts', () => {
    expect(fullJitterDelay(60, base, cap, () => 0.5)).toBe(cap / 2);
  });
});
