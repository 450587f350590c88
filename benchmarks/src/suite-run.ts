import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import type { CellResult } from './cell-run.js';
import { type BrokerHandle, kafkaBrokers } from './kafka-broker.js';
import { machineInfo } from './machine.js';
import { cellsOf, type Plan, type StorePlan } from './plan.js';
import { REPORT_VERSION, type Report, type WrittenReport, writeReport } from './report.js';
import { type RunProgress, runCells } from './runner.js';
import { SHAPES, type ShapeName } from './shapes.js';
import { DEFAULT_PG_URL } from './store-postgres.js';
import { DEFAULT_REDIS_URL } from './store-redis.js';
import { type StoreSpec, storeLabel } from './stores.js';

const BENCH_ROOT = fileURLToPath(new URL('..', import.meta.url));

export interface SuiteOptions {
  plan: Plan;
  outDir?: string;
  markdownPath?: string;
  /** Shown in RESULTS.md as the command that made it. */
  command?: string;
  onProgress?: (p: RunProgress) => void;
  log?: (line: string) => void;
  env?: NodeJS.ProcessEnv;
}

/** Store addresses from the environment, with the defaults of this machine's servers. */
export function storeUrls(env: NodeJS.ProcessEnv = process.env): { pgUrl: string; redisUrl: string } {
  return {
    pgUrl: env.SPILLWAY_PG_URL ?? DEFAULT_PG_URL,
    redisUrl: env.SPILLWAY_REDIS_URL ?? DEFAULT_REDIS_URL,
  };
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
      return { kind: 'kafka' };
    case 'bridge':
      return { kind: 'bridge', mode: mode ?? 'copy', url: pgUrl };
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

/** Command-line flags that reshape a plan (shared by `npm run bench` and `spillway bench`). */
export interface BenchFlags {
  stores?: string[];
  shapes?: string[];
  maxRecords?: number[];
  maxAge?: number[];
  idle?: number[];
  concurrency?: number[];
  sizeOnly?: number[];
  repeats?: number;
  rate?: number;
  duration?: number;
  fullGrid?: boolean;
}

/** Applies flags to a plan; a grid flag drops the smaller off-steady grid so the grid asked for runs everywhere. */
export function applyFlags(plan: Plan, o: BenchFlags, env: NodeJS.ProcessEnv = process.env): Plan {
  for (const s of o.shapes ?? []) {
    if (!SHAPES.includes(s as ShapeName))
      throw new TypeError(`Expected shapes among ${SHAPES.join(', ')}, got \`${s}\``);
  }
  const shapes = o.shapes as ShapeName[] | undefined;
  if (o.stores)
    plan.stores = o.stores.map((name) => ({ store: parseStore(name, env), shapes: shapes ?? ['steady'] }));
  else if (shapes) for (const s of plan.stores) s.shapes = shapes;
  if (o.maxRecords) plan.maxRecords = o.maxRecords;
  if (o.maxAge) plan.maxAgeMs = o.maxAge;
  if (o.idle) plan.idleMs = o.idle;
  if (o.concurrency) plan.concurrency = o.concurrency;
  if (o.sizeOnly) plan.sizeOnly = o.sizeOnly;
  if (o.repeats !== undefined) {
    if (!(Number.isInteger(o.repeats) && o.repeats >= 1))
      throw new TypeError(`Expected \`repeats\` to be an integer >= 1, got \`${o.repeats}\``);
    plan.repeats = o.repeats;
  }
  if (o.fullGrid || o.maxRecords || o.maxAge) delete plan.sideGrid;
  for (const shape of SHAPES) {
    const over = { ...plan.shapeOverrides[shape] };
    if (o.duration) over.durationMs = o.duration;
    if (o.rate && shape === 'steady') over.rate = o.rate;
    plan.shapeOverrides[shape] = over;
  }
  return plan;
}

/** Runs a plan, each cell in fresh processes, and writes results.json, the charts and RESULTS.md. */
export async function runSuite(options: SuiteOptions): Promise<{ report: Report; written: WrittenReport }> {
  const log = options.log ?? (() => {});
  const started = Date.now();
  const notes: string[] = [];
  const plan = structuredClone(options.plan);
  const servers: Record<string, string> = {};
  let broker: BrokerHandle | undefined;

  const wantsKafka = plan.stores.some((s) => s.store.kind === 'kafka' || s.store.kind === 'bridge');
  if (wantsKafka) {
    try {
      log('starting or finding a Kafka broker for the Kafka cells …');
      broker = await kafkaBrokers(options.env);
      servers.Kafka = broker.version;
      for (const s of plan.stores)
        if (s.store.kind === 'kafka' || s.store.kind === 'bridge') s.store.brokers = broker.brokers;
    } catch (e) {
      const why = (e as Error).message.split('\n')[0];
      notes.push(
        `Kafka cells skipped: no broker (${why}). Set SPILLWAY_KAFKA_BROKERS, or install Java 17 for the harness broker.`,
      );
      plan.stores = plan.stores.filter((s) => s.store.kind !== 'kafka' && s.store.kind !== 'bridge');
    }
  }

  try {
    const machine = machineInfo(servers);
    const cells = cellsOf(plan);
    log(
      `${cells.length} cells × ${plan.repeats} run(s) over ${plan.stores.map((s: StorePlan) => storeLabel(s.store)).join(', ')}`,
    );
    const results = await runCells(cells, plan.repeats, options.onProgress);
    for (const c of results) {
      for (const r of c.runs as CellResult[])
        if (r.storeVersion) machine.servers[r.storeVersion.split(' ')[0]!] = r.storeVersion;
      if (c.runs.length === 0)
        notes.push(`${c.id}: every run failed — ${c.errors[0]?.split('\n')[0] ?? 'unknown error'}`);
      else if (c.errors.length > 0)
        notes.push(
          `${c.id}: ${c.errors.length} of ${plan.repeats} runs failed — ${c.errors[0]?.split('\n')[0]}`,
        );
    }
    const report: Report = {
      version: REPORT_VERSION,
      generatedAt: new Date(started).toISOString(),
      durationSeconds: Math.round((Date.now() - started) / 1000),
      machine,
      plan,
      notes,
      cells: results,
    };
    const written = await writeReport(report, {
      outDir: options.outDir ?? join(BENCH_ROOT, 'results'),
      markdownPath: options.markdownPath ?? join(BENCH_ROOT, 'RESULTS.md'),
      command: options.command ?? 'npm run bench',
    });
    return { report, written };
  } finally {
    await broker?.stop();
  }
}
