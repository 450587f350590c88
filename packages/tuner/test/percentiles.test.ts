import { Histogram } from '@spillway/core/kit';
import * as hdr from 'hdr-histogram-js';
import { describe, expect, it } from 'vitest';
import { SeededRandom } from '../src/random.js';

/** Nearest-rank percentile of sorted samples: the smallest value with at least q % of samples at or below it. */
function nearestRank(sorted: readonly number[], q: number): number {
  const rank = Math.max(1, Math.ceil((q / 100) * sorted.length));
  return sorted[rank - 1]!;
}

/** Latency-like samples: mostly a few ms, a long tail to seconds (log-normal, seeded). */
function samples(n: number, seed: number): number[] {
  const rnd = new SeededRandom(seed);
  const out: number[] = [];
  for (let i = 0; i < n; i++) {
    // Box–Muller (common practice) for a normal draw, exponentiated.
    const z = Math.sqrt(-2 * Math.log(1 - rnd.next())) * Math.cos(2 * Math.PI * rnd.next());
    out.push(Math.exp(1.5 + 1.2 * z));
  }
  return out;
}

describe('latency percentiles', () => {
  for (const n of [1000, 10_000]) {
    it(`agree with the same ${n} samples sorted by hand, to HdrHistogram's three significant digits`, () => {
      const values = samples(n, n);
      const h = new Histogram(1000); // the cell runner's histogram: ms with µs resolution
      for (const v of values) h.record(v);
      const sorted = [...values].sort((a, b) => a - b);
      const s = h.summary();
      // Source: HdrHistogram (and the hdr-histogram-js reference library): with 3 significant
      // value digits a recorded value is reported within 0.1 % of itself; the cell records in
      // µs, so add one unit of 1 µs for rounding.
      const close = (got: number, want: number) =>
        expect(Math.abs(got - want)).toBeLessThanOrEqual(want * 0.001 + 0.001);
      close(s.p50, nearestRank(sorted, 50));
      close(s.p90, nearestRank(sorted, 90));
      close(s.p99, nearestRank(sorted, 99));
      close(s.max, sorted[sorted.length - 1]!);
      close(s.min, sorted[0]!);
      expect(s.count).toBe(n);
    });
  }

  it('report what the reference library reports for the same values', () => {
    const values = samples(5000, 3);
    const ours = new Histogram(1000);
    const ref = hdr.build({
      lowestDiscernibleValue: 1,
      highestTrackableValue: 2 ** 40,
      numberOfSignificantValueDigits: 3,
    });
    for (const v of values) {
      ours.record(v);
      ref.recordValue(Math.round(v * 1000));
    }
    // Source: hdr-histogram-js, getValueAtPercentile (the reference implementation of the percentiles).
    for (const q of [50, 90, 99, 99.9]) expect(ours.percentile(q)).toBe(ref.getValueAtPercentile(q) / 1000);
  });

  it('are not fooled by a tail: p99 of 99 fast and 1 slow sample is a fast one, max is the slow one', () => {
    const h = new Histogram(1000);
    for (let i = 0; i < 99; i++) h.record(2);
    h.record(900);
    const s = h.summary();
    // Nearest rank (from memory: the textbook definition): rank ceil(0.99 × 100) = 99 → 2 ms.
    expect(s.p99).toBeCloseTo(2, 2);
    expect(s.max).toBeCloseTo(900, 0);
  });
});
