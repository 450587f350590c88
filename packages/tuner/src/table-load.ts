// When the records of a table trial arrive: one of the suite's shapes at the user's rate, or a
// replay of the sample's own timestamps.
import { SpillwayError } from '@spillway/core';
import { type Arrival, arrivals, type ShapeName, shapeParams } from './shapes.js';

/** A trial's load: a named shape, or `replay` of the sample's timestamps. */
export type TableShape = ShapeName | 'replay';

export interface TableLoad {
  shape: TableShape;
  /** Offered records per second (for `replay`: the recording's own mean rate unless given). */
  rate: number;
  durationMs: number;
  seed: number;
}

/**
 * Arrival times (ms from the trial's start) of a load. `replay` walks the recorded offsets from
 * row `startRow` on, scaled by `scale` (1 = real time, 0.5 = twice as fast), and goes round again
 * after the last row, one mean gap later.
 */
export function* tableArrivals(
  load: TableLoad,
  replay?: { timesMs: number[]; scale: number; startRow: number },
): Generator<number> {
  if (load.shape !== 'replay') {
    const shape = shapeParams(load.shape, {
      durationMs: load.durationMs,
      seed: load.seed,
      ...(load.shape === 'steady' || load.shape === 'skewed' || load.shape === 'gap'
        ? { rate: load.rate }
        : {}),
      ...(load.shape === 'trickle' ? { rate: load.rate } : {}),
      ...(load.shape === 'burst' ? { burstSize: Math.max(1, Math.round(load.rate)) } : {}),
      ...(load.shape === 'gap' ? { gapAtMs: load.durationMs / 3, gapMs: load.durationMs / 3 } : {}),
    });
    for (const a of arrivals(shape) as Generator<Arrival>) yield a.at;
    return;
  }
  if (!replay || replay.timesMs.length === 0) throw new TypeError('replay needs the sample timestamps');
  const times = replay.timesMs;
  const n = times.length;
  const span = times[n - 1]! - times[0]!;
  const gap = n > 1 ? span / (n - 1) : 1000;
  const lap = (span + gap) * replay.scale;
  // Where in the recording the trial starts, so that rows and their times stay together.
  const first = times[replay.startRow % n]! * replay.scale;
  for (let k = replay.startRow; ; k++) {
    const at =
      Math.floor(k / n) * lap + times[k % n]! * replay.scale - first - Math.floor(replay.startRow / n) * lap;
    if (at >= load.durationMs) return;
    yield at;
  }
}

/** Mean records per second of a recording. */
export function recordedRate(timesMs: number[]): number {
  if (timesMs.length < 2) return 1;
  const span = timesMs[timesMs.length - 1]! - timesMs[0]!;
  return span <= 0 ? timesMs.length : ((timesMs.length - 1) / span) * 1000;
}

/** The load of every trial of a tune: its shape, its rate, and each trial's arrival times. */
export interface LoadPlan {
  shape: TableShape;
  rate: number;
  /** Arrival times (ms from the start) of a trial; `startRow` is where the records pick up. */
  schedule(durationMs: number, seed: number, startRow: number): number[];
}

/**
 * The shape and rate asked for (`replay` when a timestamp column is named), the rate of a replay
 * defaulting to the recording's own. Throws SPILLWAY_INPUT_ERROR when the timestamps span no time.
 */
export function planLoad(
  o: { shape?: TableShape | undefined; rate?: number | undefined; timestampColumn?: string | undefined },
  timesMs: number[] | undefined,
): LoadPlan {
  const shape: TableShape = o.shape ?? (o.timestampColumn !== undefined ? 'replay' : 'steady');
  let rate = o.rate ?? 1000;
  let scale = 1;
  if (shape === 'replay') {
    const times = timesMs ?? [];
    if (times.length < 2 || times[times.length - 1]! <= times[0]!)
      throw new SpillwayError(
        'SPILLWAY_INPUT_ERROR',
        `--timestamp-column ${o.timestampColumn}: the sample's timestamps span no time, so there is nothing to replay`,
      );
    const natural = recordedRate(times);
    rate = o.rate ?? natural;
    scale = natural / rate;
  }
  return {
    shape,
    rate,
    schedule: (durationMs, seed, startRow) => [
      ...tableArrivals({ shape, rate, durationMs, seed }, timesMs ? { timesMs, scale, startRow } : undefined),
    ],
  };
}
