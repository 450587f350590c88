import type { Distribution } from '@spillway/core';

/** Rounds for reports; non-finite values pass through. */
export function round(n: number, digits = 3): number {
  if (!Number.isFinite(n)) return n;
  const f = 10 ** digits;
  return Math.round(n * f) / f;
}

// An HdrHistogram quantile is the top of its bucket, so it can sit a hair (< 0.1 %) above the
// recorded max; clamp so that no report shows p99 > max.
export function roundDist(d: Distribution): Distribution {
  const q = (v: number) => round(Math.min(v, d.max));
  return {
    count: d.count,
    min: round(d.min),
    mean: round(d.mean),
    p50: q(d.p50),
    p90: q(d.p90),
    p99: q(d.p99),
    max: round(d.max),
  };
}
