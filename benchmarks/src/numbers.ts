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

/** Median, extremes and spread ((max − min) / median, in %) of repeated samples. */
export function summary(xs: number[]): { median: number; min: number; max: number; spreadPct: number } {
  const s = [...xs].sort((a, b) => a - b);
  const mid = s.length >> 1;
  const median = s.length % 2 ? s[mid]! : (s[mid - 1]! + s[mid]!) / 2;
  return {
    median,
    min: s[0]!,
    max: s[s.length - 1]!,
    spreadPct: ((s[s.length - 1]! - s[0]!) / median) * 100,
  };
}

/** A count or rate for a report line: rounded, with thousands separators. */
export const fmt = (n: number): string => Math.round(n).toLocaleString('en-US');
