import * as hdr from 'hdr-histogram-js';
import type { Distribution } from './types.js';

/**
 * A distribution backed by an HdrHistogram (3 significant digits). Values are stored as integers
 * in `scale` units per reported unit, so milliseconds keep microsecond resolution.
 */
export class Histogram {
  private readonly h: hdr.Histogram;

  constructor(private readonly scale = 1) {
    this.h = hdr.build({
      lowestDiscernibleValue: 1,
      highestTrackableValue: 2 ** 40,
      numberOfSignificantValueDigits: 3,
      autoResize: true,
    });
  }

  record(value: number): void {
    const v = Math.round(value * this.scale);
    this.h.recordValue(Math.max(0, v));
  }

  /** Records `value` `count` times in one step. */
  recordMany(value: number, count: number): void {
    const v = Math.round(value * this.scale);
    this.h.recordValueWithCount(Math.max(0, v), count);
  }

  /** Quantile in reported units; `q` in [0, 100]. */
  percentile(q: number): number {
    return this.h.totalCount === 0 ? 0 : this.h.getValueAtPercentile(q) / this.scale;
  }

  get count(): number {
    return this.h.totalCount;
  }

  summary(): Distribution {
    const h = this.h;
    if (h.totalCount === 0) return { count: 0, min: 0, mean: 0, p50: 0, p90: 0, p99: 0, max: 0 };
    const s = this.scale;
    return {
      count: h.totalCount,
      min: h.minNonZeroValue === Number.MAX_SAFE_INTEGER ? 0 : h.minNonZeroValue / s,
      mean: h.mean / s,
      p50: h.getValueAtPercentile(50) / s,
      p90: h.getValueAtPercentile(90) / s,
      p99: h.getValueAtPercentile(99) / s,
      max: h.maxValue / s,
    };
  }

  reset(): void {
    this.h.reset();
  }
}
