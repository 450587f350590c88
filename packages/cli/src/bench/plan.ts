import {
  type CellSpec,
  cellId,
  DEFAULT_PG_URL,
  DEFAULT_REDIS_URL,
  graceFor,
  type Settings,
  SHAPES,
  type ShapeName,
  type ShapeParams,
  type StoreSpec,
  shapeParams,
  type Variant,
} from '@spillway/tuner';

/** One store and the shapes it runs. */
export interface StorePlan {
  store: StoreSpec;
  shapes: ShapeName[];
  /** A grid of this store's own (slow stores get fewer cells). */
  grid?: { maxRecords: number[]; maxAgeMs: number[] };
}

/** The settings grid and what else a run includes. */
export interface Plan {
  stores: StorePlan[];
  maxRecords: number[];
  maxAgeMs: number[];
  idleMs: number[];
  concurrency: number[];
  /** maxRecords of the size-only baseline cells (empty: no size-only baseline). */
  sizeOnly: number[];
  /** Include the one-write-per-record baseline. */
  perRecord: boolean;
  /** Runs per cell, each in a fresh process. */
  repeats: number;
  /**
   * A smaller grid for every shape but steady, whose cells mostly show what each setting does
   * with silence (stuck records, tail latency) rather than trace a throughput curve.
   */
  sideGrid?: { maxRecords: number[]; maxAgeMs: number[] };
  /** Parameters layered over each shape's defaults (rate, durationMs, keys, seed, …). */
  shapeOverrides: Partial<Record<ShapeName, Partial<ShapeParams>>>;
}

/** Every cell of a plan, in run order (store, then shape, then baselines, then the grid). */
export function cellsOf(plan: Plan): CellSpec[] {
  const cells: CellSpec[] = [];
  const defaults = { idleMs: plan.idleMs[0] ?? 100, concurrency: 1 };
  for (const { store, shapes, grid: own } of plan.stores) {
    for (const shapeName of shapes) {
      const shape = shapeParams(shapeName, plan.shapeOverrides[shapeName]);
      const add = (variant: Variant, settings: Settings) => {
        const id = cellId(store, shapeName, variant, settings);
        cells.push({ id, store, shape, variant, settings, graceMs: graceFor(variant, settings) });
      };
      // The bridge feeds a Spillway sink; a size-only batcher has no bridge to sit behind.
      if (store.kind !== 'bridge')
        for (const n of plan.sizeOnly)
          add('size-only', { maxRecords: n, maxAgeMs: 0, idleMs: 0, concurrency: 1 });
      if (plan.perRecord)
        add('per-record', { maxRecords: 1, maxAgeMs: Math.min(...plan.maxAgeMs), ...defaults });
      const grid = own ?? (shapeName !== 'steady' && plan.sideGrid ? plan.sideGrid : plan);
      for (const concurrency of plan.concurrency) {
        for (const idleMs of plan.idleMs) {
          for (const maxAgeMs of grid.maxAgeMs) {
            for (const maxRecords of grid.maxRecords)
              add('spillway', { maxRecords, maxAgeMs, idleMs, concurrency });
          }
        }
      }
    }
  }
  return cells;
}

/** Store addresses from the environment, with the defaults of this machine's servers. */
export function storeUrls(env: NodeJS.ProcessEnv = process.env): { pgUrl: string; redisUrl: string } {
  return {
    pgUrl: env.SPILLWAY_PG_URL ?? DEFAULT_PG_URL,
    redisUrl: env.SPILLWAY_REDIS_URL ?? DEFAULT_REDIS_URL,
  };
}

/** Kafka bootstrap addresses from SPILLWAY_KAFKA_BROKERS (comma-separated); empty when unset. */
export function kafkaBrokers(env: NodeJS.ProcessEnv = process.env): string[] {
  return (env.SPILLWAY_KAFKA_BROKERS ?? '')
    .split(',')
    .map((s) => s.trim())
    .filter(Boolean);
}

/** Parses a store name such as `postgres/copy`, `sim`, `redis`, `kafka`. */
export function parseStore(name: string, env: NodeJS.ProcessEnv = process.env): StoreSpec {
  const [kind, mode] = name.split('/') as [string, string | undefined];
  const { pgUrl, redisUrl } = storeUrls(env);
  switch (kind) {
    case 'noop':
      return { kind: 'noop' };
    case 'sim':
      return { kind: 'sim', latencyMs: mode === undefined ? 2 : Number(mode), perRecordUs: 1 };
    case 'postgres':
      return { kind: 'postgres', mode: mode ?? 'insert', url: pgUrl };
    case 'redis':
      return { kind: 'redis', url: redisUrl };
    case 'kafka':
      return { kind: 'kafka', brokers: kafkaBrokers(env) };
    case 'bridge':
      return { kind: 'bridge', mode: mode ?? 'copy', url: pgUrl, brokers: kafkaBrokers(env) };
    default:
      throw new TypeError(
        `Expected a store of noop, sim[/<ms>], postgres[/insert|copy|upsert], redis, kafka, bridge[/<pg mode>], got \`${name}\``,
      );
  }
}

/** The default run: about 15–20 minutes on 2 cores. */
export function defaultPlan(env: NodeJS.ProcessEnv = process.env): Plan {
  const all = [...SHAPES];
  const stores: Array<[string, ShapeName[]]> = [
    ['noop', ['steady']],
    ['sim', all],
    ['postgres', ['steady', 'trickle', 'burst']],
    ['postgres/copy', ['steady']],
    ['postgres/upsert', ['steady']],
    // What a trickle does to a size-only batcher does not depend on the store: sim and postgres show it.
    ['redis', ['steady']],
    ['kafka', ['steady']],
  ];
  return {
    stores: [
      ...stores.map(([name, shapes]) => ({ store: parseStore(name, env), shapes })),
      // Each bridge cell joins a consumer group first (seconds): a small grid of its own.
      {
        store: parseStore('bridge', env),
        shapes: ['steady'],
        grid: { maxRecords: [100, 1000], maxAgeMs: [10, 100] },
      },
    ],
    maxRecords: [10, 100, 1000],
    maxAgeMs: [10, 100, 500],
    idleMs: [100],
    concurrency: [1],
    sideGrid: { maxRecords: [100, 1000], maxAgeMs: [10, 500] },
    sizeOnly: [100, 1000],
    perRecord: true,
    repeats: 3,
    shapeOverrides: {
      steady: { durationMs: 2000 },
      trickle: { durationMs: 3000 },
      burst: { durationMs: 2100 },
      gap: { durationMs: 3000, gapAtMs: 1000, gapMs: 1000 },
    },
  };
}

/** A run of a minute or two: the no-op-with-latency and PostgreSQL stores, two shapes, one run per cell. */
export function quickPlan(env: NodeJS.ProcessEnv = process.env): Plan {
  return {
    ...defaultPlan(env),
    stores: [
      { store: parseStore('sim', env), shapes: ['steady', 'trickle'] },
      { store: parseStore('postgres', env), shapes: ['steady', 'trickle'] },
    ],
    maxRecords: [10, 1000],
    maxAgeMs: [10, 500],
    sideGrid: { maxRecords: [1000], maxAgeMs: [500] },
    sizeOnly: [100],
    repeats: 1,
    shapeOverrides: { steady: { durationMs: 1500 }, trickle: { durationMs: 2500 } },
  };
}
