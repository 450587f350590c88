import { describe, expect, it } from 'vitest';
import type { CellResult } from '../src/cell-result.js';
import { ageCandidates, type TuneOutcome, tuneGrid } from '../src/tune.js';
import { formatTune } from '../src/tune-format.js';

describe('the tuner', () => {
  it('tries ages of a tenth, a quarter and a half of the target, and one write per record once', () => {
    expect(ageCandidates(100)).toEqual([10, 25, 50]);
    expect(ageCandidates(4)).toEqual([1, 2]);
    const grid = tuneGrid(100, [50, 1000]);
    expect(grid.filter((s) => s.maxRecords === 1)).toHaveLength(1);
    expect(grid).toHaveLength(1 + 3 * 2);
  });

  it("says the store's own write time is the reason when no setting can meet the target", () => {
    const result = {
      latencyMs: { p50: 30 },
      latencyWithStuckMs: { p99: 60 },
      throughput: 900,
      batches: 10,
      meanBatchRecords: 90,
      flushDurationMs: { p99: 45 },
      stuck: { records: 0 },
    } as unknown as CellResult;
    const outcome: TuneOutcome = {
      store: 'postgres/insert',
      p99Ms: 20,
      shapes: ['steady'],
      rate: 1000,
      best: undefined,
      runnerUp: undefined,
      candidates: [
        {
          settings: { maxRecords: 50, maxAgeMs: 2, idleMs: 100, concurrency: 1 },
          results: { steady: result },
          throughput: 900,
          worstP99: 60,
          meets: false,
        },
      ],
      storeWriteP99Ms: 45,
      failures: [],
    };
    const text = formatTune(outcome);
    expect(text).toContain('No setting met p99 ≤ 20 ms');
    expect(text).toContain("the store's own write already takes 45.0 ms at p99");
  });
});
