// The search every tune on the user's store runs, driven by a modelled store (a trial's figures
// come from a formula, not a server): its rounds, resets, validation fallback and interruption.
import { describe, expect, it } from 'vitest';
import type { Settings } from '../src/cell-spec.js';
import { interruption } from '../src/interrupt.js';
import { type SearchSpec, searchSettings, type TuneTableEvent } from '../src/search.js';
import type { TableTrial, WriteSums } from '../src/table-trial.js';

/** A store that costs 2 ms per write plus 10 µs per record; p99 grows with maxAgeMs, plus `extraMs`. */
function modelled(
  s: Settings,
  durationMs: number,
  rate: number,
  extraMs = 0,
): TableTrial & { scheduled: number } {
  const records = Math.round((rate * durationMs) / 1000);
  const batches = Math.max(1, Math.ceil(records / s.maxRecords));
  const perBatch = records / batches;
  const writeMs = 2 + 0.01 * perBatch;
  const sums: WriteSums = {
    count: batches,
    records,
    ms: batches * writeMs,
    recordsSq: batches * perBatch * perBatch,
    recordsMs: batches * perBatch * writeMs,
  };
  const p99Ms = Math.min(s.maxAgeMs, (perBatch / rate) * 1000) + writeMs + extraMs;
  return {
    settings: s,
    offered: records,
    offeredRate: rate,
    durable: records,
    deadLettered: 0,
    stuck: 0,
    throughput: rate,
    p50Ms: p99Ms / 2,
    p99Ms,
    maxMs: p99Ms,
    writesPerSecond: batches / (durationMs / 1000),
    meanBatch: perBatch,
    storeMsPerRecord: writeMs / perBatch,
    writeP99Ms: writeMs,
    backpressureMs: 0,
    sums,
    scheduled: records,
  };
}

function spec(over: Partial<SearchSpec> = {}): SearchSpec & { events: TuneTableEvent[]; resets: number[] } {
  const events: TuneTableEvent[] = [];
  const resets: number[] = [];
  let trials = 0;
  return {
    p99Ms: 200,
    headroom: 0.25,
    rate: 1000,
    trialMs: 1000,
    validateMs: 3000,
    validateAttempts: 2,
    budgetMs: 20_000,
    maxConcurrency: 4,
    started: performance.now(),
    trial: async (s, durationMs) => {
      trials++;
      return modelled(s, durationMs, 1000);
    },
    reset: async () => void resets.push(trials),
    halt: () => undefined,
    onProgress: (e) => events.push(e),
    events,
    resets,
    ...over,
  };
}

describe('the search on the user’s store', () => {
  it('announces its plan, empties the scratch store after every trial, and validates the cheapest setting that meets the aim', async () => {
    const s = spec();
    const found = await searchSettings(s);
    const plan = s.events.find((e) => e.kind === 'plan');
    const trials = s.events.filter((e) => e.kind === 'trial');
    expect(plan).toMatchObject({ kind: 'plan', validateMs: 3000 });
    expect(trials.length).toBeGreaterThan(0);
    expect(trials.length).toBeLessThanOrEqual((plan as { trials: number }).trials);
    // After the warm-up, after each trial, and before the validation run.
    expect(s.resets).toEqual([1, ...trials.map((_, i) => i + 2), trials.length + 1]);
    const meeting = found.trials.filter((t) => t.meets);
    const cheapest = Math.min(...meeting.map((t) => t.storeMsPerRecord));
    expect(found.recommended?.storeMsPerRecord).toBeCloseTo(cheapest, 6);
    expect(found.validations).toHaveLength(1);
    expect(found.validation?.holds).toBe(true);
    // The fitted write cost is the model's: 2 ms + 10 µs per record.
    expect(found.writeCost.fixedMs).toBeCloseTo(2, 2);
    expect(found.writeCost.perRecordMs).toBeCloseTo(0.01, 4);
  });

  it('moves to the next cheapest setting with a lower p99 when the validation run of the pick misses the target', async () => {
    let first: Settings | undefined;
    const s = spec({
      validateMs: 2000,
      trial: async (settings, durationMs) => {
        // Validation runs are the 2000 ms ones: the first one validated misses by 100 ms.
        if (durationMs === 2000 && (first === undefined || first === settings)) {
          first = settings;
          return modelled(settings, durationMs, 1000, 100);
        }
        return modelled(settings, durationMs, 1000);
      },
    });
    const found = await searchSettings(s);
    expect(found.validations).toHaveLength(2);
    expect(found.validations![0]!.holds).toBe(false);
    expect(found.validations![0]!.why[0]).toMatch(/^p99 .* ms > target 200 ms$/);
    expect(found.validation?.holds).toBe(true);
    const picked = found.trials.find((t) => t.settings === first)!;
    expect(found.recommended!.p99Ms).toBeLessThan(picked.p99Ms);
  });

  it('stops at the next step once interrupted, with SPILLWAY_ABORTED naming what was tidied up', async () => {
    const abort = new AbortController();
    const stop = interruption(
      { handleSignals: false, signal: abort.signal },
      'the scratch keys were deleted',
    );
    const s = spec({
      halt: stop.halt,
      onProgress: (e) => {
        if (e.kind === 'trial' && e.done === 2) abort.abort();
      },
    });
    await expect(searchSettings(s)).rejects.toMatchObject({
      code: 'SPILLWAY_ABORTED',
      message: 'The tune was interrupted; the scratch keys were deleted',
    });
    stop.dispose();
    expect(s.resets.length).toBe(3); // the warm-up's and the two trials'
  });
});
