import { SeededRandom } from './random.js';

/** The load shapes of the suite. Each one is a schedule of arrivals drawn from a seeded source. */
export type ShapeName = 'steady' | 'trickle' | 'skewed' | 'burst' | 'gap';

export const SHAPES: readonly ShapeName[] = ['steady', 'trickle', 'skewed', 'burst', 'gap'];

export interface ShapeParams {
  shape: ShapeName;
  /** Length of the schedule, ms. */
  durationMs: number;
  /**
   * Mean arrival rate, records/s: of the whole stream (steady, trickle), of the busy key (skewed),
   * of the stream while it flows (gap). Unused by burst.
   */
  rate: number;
  /** Partitions (ordering keys) the records are spread over. */
  keys: number;
  seed: number;
  /** skewed: mean rate of each quiet key, records/s. */
  quietRate?: number;
  /** burst: records per burst. */
  burstSize?: number;
  /** burst: time from the start of one burst to the start of the next, ms. */
  burstEveryMs?: number;
  /** burst: how long one burst lasts, ms. */
  burstSpanMs?: number;
  /** gap: when the stream stops, ms from the start. */
  gapAtMs?: number;
  /** gap: how long it stays silent, ms. */
  gapMs?: number;
}

/** One scheduled record: when it is due (ms from the start) and its partition. */
export interface Arrival {
  at: number;
  partition: number;
}

/**
 * The suite's default parameters of each shape, scaled by `rate` where a rate applies. The
 * numbers are chosen so that a size-only batcher of 10–1000 records meets each shape's trap:
 * trickle never fills a batch, skewed leaves quiet partitions unfilled, a burst ends between two
 * batch boundaries, a gap strands the records before it.
 */
export function shapeParams(shape: ShapeName, overrides: Partial<ShapeParams> = {}): ShapeParams {
  const base: ShapeParams = { shape, durationMs: 3000, rate: 5000, keys: 4, seed: 1 };
  switch (shape) {
    case 'steady':
      break;
    case 'trickle':
      Object.assign(base, { durationMs: 4000, rate: 5 });
      break;
    case 'skewed':
      Object.assign(base, { keys: 16, rate: 2000, quietRate: 0.5 });
      break;
    case 'burst':
      Object.assign(base, { burstSize: 1550, burstEveryMs: 1000, burstSpanMs: 30 });
      break;
    case 'gap':
      Object.assign(base, { durationMs: 4000, rate: 2000, gapAtMs: 1500, gapMs: 1500 });
      break;
  }
  const merged = { ...base, ...stripUndefined(overrides), shape };
  validate(merged);
  return merged;
}

function stripUndefined<T extends object>(o: T): Partial<T> {
  return Object.fromEntries(Object.entries(o).filter(([, v]) => v !== undefined)) as Partial<T>;
}

function validate(p: ShapeParams): void {
  const positive = (name: string, v: number | undefined, optional = false) => {
    if (v === undefined && optional) return;
    if (typeof v !== 'number' || !Number.isFinite(v) || v <= 0) {
      throw new TypeError(
        `Expected \`${name}\` of shape ${p.shape} to be a finite number > 0, got \`${String(v)}\``,
      );
    }
  };
  positive('durationMs', p.durationMs);
  positive('rate', p.rate);
  positive('keys', p.keys);
  positive('quietRate', p.quietRate, true);
  positive('burstSize', p.burstSize, true);
  positive('burstEveryMs', p.burstEveryMs, true);
  positive('burstSpanMs', p.burstSpanMs, true);
  positive('gapMs', p.gapMs, true);
  if (!Number.isInteger(p.keys))
    throw new TypeError(`Expected \`keys\` to be an integer >= 1, got \`${p.keys}\``);
}

/**
 * The arrivals of a shape, in time order. Arrival gaps are exponential (a Poisson stream), so
 * the load has the jitter of real traffic and still replays exactly for one seed.
 */
export function* arrivals(p: ShapeParams): Generator<Arrival> {
  const rnd = new SeededRandom(p.seed);
  switch (p.shape) {
    case 'steady':
    case 'trickle': {
      yield* poisson(rnd, p.rate, p.durationMs, () => rnd.int(p.keys));
      return;
    }
    case 'skewed': {
      // Partition 0 is busy; every other partition is mostly silent.
      const quiet = (p.quietRate ?? 0.5) * (p.keys - 1);
      const total = p.rate + quiet;
      yield* poisson(rnd, total, p.durationMs, () =>
        p.keys === 1 || rnd.next() * total < p.rate ? 0 : 1 + rnd.int(p.keys - 1),
      );
      return;
    }
    case 'burst': {
      const size = p.burstSize ?? 1550;
      const every = p.burstEveryMs ?? 1000;
      const span = p.burstSpanMs ?? 30;
      // The first burst starts at once; the run ends in silence after the last one.
      for (let start = 0; start + span <= p.durationMs; start += every) {
        for (let i = 0; i < size; i++) yield { at: start + (span * i) / size, partition: rnd.int(p.keys) };
      }
      return;
    }
    case 'gap': {
      const gapAt = p.gapAtMs ?? p.durationMs / 3;
      const gapEnd = gapAt + (p.gapMs ?? p.durationMs / 3);
      for (const a of poisson(rnd, p.rate, p.durationMs, () => rnd.int(p.keys))) {
        if (a.at < gapAt || a.at >= gapEnd) yield a;
      }
      return;
    }
  }
}

function* poisson(
  rnd: SeededRandom,
  ratePerSec: number,
  durationMs: number,
  pick: () => number,
): Generator<Arrival> {
  const meanGapMs = 1000 / ratePerSec;
  let t = rnd.exponential(meanGapMs);
  while (t < durationMs) {
    yield { at: t, partition: pick() };
    t += rnd.exponential(meanGapMs);
  }
}

/** Records a shape is expected to offer over its schedule (the realised count is measured). */
export function expectedRecords(p: ShapeParams): number {
  switch (p.shape) {
    case 'steady':
    case 'trickle':
      return (p.rate * p.durationMs) / 1000;
    case 'skewed':
      return ((p.rate + (p.quietRate ?? 0.5) * (p.keys - 1)) * p.durationMs) / 1000;
    case 'burst': {
      const every = p.burstEveryMs ?? 1000;
      const span = p.burstSpanMs ?? 30;
      return (Math.floor((p.durationMs - span) / every) + 1) * (p.burstSize ?? 1550);
    }
    case 'gap':
      return (p.rate * (p.durationMs - (p.gapMs ?? p.durationMs / 3))) / 1000;
  }
}
