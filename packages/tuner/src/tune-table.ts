// tuneTable(): picks batch settings on a scratch copy of the user's own PostgreSQL table, with
// the user's rows, write mode, rate and arrival shape, then checks the pick with one more run.
import { SpillwayError } from '@spillway/core';
import { invalidOption } from '@spillway/core/kit';
import type pg from 'pg';
import type { Settings } from './cell-spec.js';
import { round } from './numbers.js';
import { prefillScratch } from './prefill.js';
import type { ScratchTable } from './scratch.js';
import { SHAPES } from './shapes.js';
import { copyLacks, resolveKey, type TableInfo } from './table-info.js';
import { recordedRate, type TableLoad, type TableShape, tableArrivals } from './table-load.js';
import type { RecordCycle, RecordSet, TableRow, VariedColumn } from './table-records.js';
import {
  byCost,
  firstRound,
  fitWriteCost,
  judge,
  type RankedTrial,
  recommend,
  secondRound,
  settingsKey,
  type WriteCost,
} from './table-search.js';
import type { TableTrial } from './table-trial.js';

export type TableMode = 'insert' | 'copy' | 'upsert';

export interface Validation {
  durationMs: number;
  trial: TableTrial & { scheduled: number };
  holds: boolean;
  why: string[];
}

const sameSettings = (a: Settings, b: Settings) =>
  a.maxRecords === b.maxRecords &&
  a.maxAgeMs === b.maxAgeMs &&
  a.idleMs === b.idleMs &&
  a.concurrency === b.concurrency;

export interface TableTuneOptions {
  /** postgres://… of the server that holds the table. */
  url: string;
  /** `schema.table`, or a table on the search path. */
  table: string;
  /** The write mode the application will use. @default 'insert' */
  mode?: TableMode;
  /** Upsert conflict key columns. @default the primary key */
  key?: string[];
  /** A CSV or NDJSON file of the user's records; without one, rows are generated from the column types. */
  sample?: string;
  /** The sample field whose timestamps `replay` follows. */
  timestampColumn?: string;
  /** @default 'steady' (or 'replay' when timestampColumn is given) */
  shape?: TableShape;
  /** Offered records per second. @default 1000; replay: the recording's own rate */
  rate?: number;
  /** The p99 accept → durable target, ms. */
  p99Ms: number;
  /** Fraction of the target kept in reserve: a setting must reach p99 ≤ target × (1 − headroom). @default 0.25 */
  headroom?: number;
  /** Time the search may take, ms (the validation run comes on top). @default 60000 */
  budgetMs?: number;
  /** Length of one trial, ms. @default 2000 */
  trialMs?: number;
  /** Length of the validation run, ms; 0 skips it. @default 10000 */
  validateMs?: number;
  /** Validation runs at most: when one misses the target, the next cheapest setting with a lower p99 is run. @default 2 */
  validateAttempts?: number;
  /** Rows written into the copy before measuring. @default 0 */
  prefill?: number;
  /** Highest concurrency tried. @default 4 */
  maxConcurrency?: number;
  /** Drop the scratch schema and stop on SIGINT / SIGTERM (then reject with SPILLWAY_ABORTED). @default true */
  handleSignals?: boolean;
  signal?: AbortSignal;
  onProgress?: (e: TuneTableEvent) => void;
}

export type TuneTableEvent =
  | { kind: 'plan'; trials: number; estimateMs: number; validateMs: number }
  | { kind: 'note'; text: string }
  | { kind: 'trial'; done: number; total: number; trial: TableTrial; round: 1 | 2 }
  | { kind: 'validate'; durationMs: number; settings: Settings };

export interface TableTuneOutcome {
  table: string;
  scratch: string;
  server: string;
  mode: TableMode;
  key?: string[];
  records: {
    source: string;
    generated: boolean;
    rows: number;
    columns: string[];
    ignored: string[];
    defaulted: string[];
    varied: VariedColumn[];
    repeating: string[];
  };
  /** What the scratch copy does not have. */
  lacks: string[];
  /** Serial columns whose default the copy draws from a sequence of its own. */
  reseeded: string[];
  prefilled: number;
  load: { shape: TableShape; rate: number; trialMs: number };
  target: { p99Ms: number; headroom: number; aimMs: number };
  writeCost: WriteCost;
  trials: RankedTrial[];
  recommended?: RankedTrial;
  /** The last validation run: of `recommended`. */
  validation?: Validation;
  /** Every validation run, in order: a pick that missed, then the next cheapest with a lower p99. */
  validations?: Validation[];
  elapsedMs: number;
}

const MODES: readonly TableMode[] = ['insert', 'copy', 'upsert'];
const OVERHEAD_MS = 400;

function check(o: TableTuneOptions): void {
  const positive = (name: string, v: number | undefined, min = 0, allowZero = false) => {
    if (v === undefined) return;
    if (!(typeof v === 'number' && Number.isFinite(v) && (allowZero ? v >= min : v > min)))
      throw invalidOption(name, `a finite number ${allowZero ? '>=' : '>'} ${min}`, v);
  };
  if (typeof o.url !== 'string' || !/^postgres(ql)?:/i.test(o.url))
    throw invalidOption('url', 'a postgres:// URL', o.url);
  if (typeof o.table !== 'string' || o.table.trim() === '')
    throw invalidOption('table', 'a table name such as schema.table', o.table);
  if (o.mode !== undefined && !MODES.includes(o.mode))
    throw invalidOption('mode', 'insert, copy or upsert', o.mode);
  if (o.key !== undefined && o.mode !== 'upsert')
    throw invalidOption('key', 'given only with mode upsert', o.key);
  positive('p99Ms', o.p99Ms);
  if (o.p99Ms === undefined) throw invalidOption('p99Ms', 'a finite number > 0', o.p99Ms);
  positive('rate', o.rate);
  positive('trialMs', o.trialMs, 100, true);
  positive('budgetMs', o.budgetMs);
  positive('validateMs', o.validateMs, 0, true);
  positive('prefill', o.prefill, 0, true);
  positive('validateAttempts', o.validateAttempts, 1, true);
  positive('maxConcurrency', o.maxConcurrency, 1, true);
  if (o.headroom !== undefined && !(o.headroom >= 0 && o.headroom < 1))
    throw invalidOption('headroom', 'a fraction in [0, 1)', o.headroom);
  if (o.shape !== undefined && o.shape !== 'replay' && !SHAPES.includes(o.shape))
    throw invalidOption('shape', `one of ${[...SHAPES, 'replay'].join(', ')}`, o.shape);
  if (o.shape === 'replay' && o.timestampColumn === undefined)
    throw invalidOption('timestampColumn', 'the sample field to replay (shape replay)', o.timestampColumn);
  if (o.timestampColumn !== undefined && o.sample === undefined)
    throw invalidOption('sample', 'a sample file holding the timestamp column', o.sample);
}

/**
 * Measures batch settings on a scratch copy of `table` and recommends the one that meets the p99
 * target with headroom at the least store time per record. The user's table is only read from
 * the catalogs and named in `CREATE TABLE … (LIKE …)`; every row goes to the copy, which is
 * dropped at the end, on an error, and on SIGINT / SIGTERM.
 */
export async function tuneTable(o: TableTuneOptions): Promise<TableTuneOutcome> {
  check(o);
  const started = performance.now();
  const mode = o.mode ?? 'insert';
  const headroom = o.headroom ?? 0.25;
  const trialMs = o.trialMs ?? 2000;
  const validateMs = o.validateMs ?? 10_000;
  const validateAttempts = Math.floor(o.validateAttempts ?? 2);
  const budgetMs = o.budgetMs ?? 60_000;
  const maxConcurrency = Math.floor(o.maxConcurrency ?? 4);
  const prefill = Math.floor(o.prefill ?? 0);
  const note = (text: string) => o.onProgress?.({ kind: 'note', text });

  const [
    { default: pgModule },
    { postgresAdapter },
    { inspectTable },
    { createScratch },
    records,
    { runTableTrial },
  ] = await Promise.all([
    import('pg'),
    import('@spillway/postgres'),
    import('./table-info.js'),
    import('./scratch.js'),
    import('./table-records.js'),
    import('./table-trial.js'),
  ]);

  const stop = new AbortController();
  let interrupted: string | undefined;
  const onSignal = (sig: NodeJS.Signals) => {
    interrupted ??= sig;
    stop.abort(new Error(sig));
  };
  const external = () => {
    interrupted ??= 'abort';
    stop.abort(o.signal?.reason);
  };
  o.signal?.addEventListener('abort', external, { once: true });
  if (o.handleSignals ?? true) {
    process.on('SIGINT', onSignal);
    process.on('SIGTERM', onSignal);
  }
  const halt = () => {
    if (stop.signal.aborted)
      throw new SpillwayError(
        'SPILLWAY_ABORTED',
        `The tune was interrupted${interrupted && interrupted !== 'abort' ? ` by ${interrupted}` : ''}; the scratch copy was dropped`,
        { details: { signal: interrupted } },
      );
  };

  const pool: pg.Pool = new pgModule.Pool({
    connectionString: o.url,
    max: maxConcurrency + 2,
    application_name: 'spillway-tune',
  });
  pool.on('error', () => undefined);
  let scratch: ScratchTable | undefined;
  try {
    const server =
      (await pool.query<{ server_version: string }>('SHOW server_version')).rows[0]?.server_version ?? '?';
    const info: TableInfo = await inspectTable(pool, o.table);
    const key = mode === 'upsert' ? resolveKey(info, o.key) : undefined;
    const needs = {
      mode,
      ...(key ? { key } : {}),
      ...(o.timestampColumn !== undefined ? { timestampColumn: o.timestampColumn } : {}),
    };
    const set: RecordSet = o.sample
      ? await records.loadSample(o.sample, info, needs)
      : records.generateRows(info, 1000);
    if (key)
      for (const k of key)
        if (!set.columns.includes(k))
          throw invalidOption('key', `columns the rows fill (${set.columns.join(', ')})`, key);
    const cycle: RecordCycle = new records.RecordCycle(set, info, needs);
    const shape: TableShape = o.shape ?? (o.timestampColumn !== undefined ? 'replay' : 'steady');
    let rate = o.rate ?? 1000;
    let scale = 1;
    if (shape === 'replay') {
      const times = set.timesMs ?? [];
      if (times.length < 2 || times[times.length - 1]! <= times[0]!)
        throw new SpillwayError(
          'SPILLWAY_INPUT_ERROR',
          `--timestamp-column ${o.timestampColumn}: the sample's timestamps span no time, so there is nothing to replay`,
        );
      const natural = recordedRate(times);
      rate = o.rate ?? natural;
      scale = natural / rate;
    }
    halt();
    scratch = await createScratch(pool, info);
    note(
      `Scratch copy: ${scratch.qualified.replace(/"/g, '')} (dropped at the end, on an error and on Ctrl-C).`,
    );
    const lacks = copyLacks(info);
    if (!o.sample)
      note(
        `No --sample: rows are generated from the column types (${set.columns.join(', ')}); give a sample of your records for real row widths and index keys.`,
      );

    const adapter = postgresAdapter<TableRow>({
      pool,
      schema: scratch.schema,
      table: scratch.table,
      columns: set.columns.map((name, i) => ({ name, type: set.types[i]! })),
      mode,
      ...(key ? { conflict: { key, action: 'update' as const } } : {}),
      map: (r) => r,
    });

    let prefilled = 0;
    if (prefill > 0) {
      note(`Prefilling the copy with ${prefill.toLocaleString('en-US')} rows …`);
      prefilled = await prefillScratch(
        pool,
        scratch,
        set,
        new records.RecordCycle(set, info, { mode: 'insert' }),
        prefill,
        halt,
      );
      if (prefilled < prefill)
        note(
          `Prefilled ${prefilled.toLocaleString('en-US')} rows, not ${prefill.toLocaleString('en-US')}: the rows make no more distinct unique keys.`,
        );
    }
    const reset = async () => {
      if (prefill === 0) await scratch!.truncate();
    };

    const load = (durationMs: number, seed: number): { schedule: number[]; load: TableLoad } => {
      const l: TableLoad = { shape, rate, durationMs, seed };
      const schedule = [
        ...tableArrivals(
          l,
          set.timesMs ? { timesMs: set.timesMs, scale, startRow: cycle.offset } : undefined,
        ),
      ];
      return { schedule, load: l };
    };
    const trial = async (settings: Settings, durationMs: number, seed: number) => {
      const { schedule } = load(durationMs, seed);
      const t = await runTableTrial({
        adapter,
        cycle,
        settings,
        schedule,
        durationMs,
        signal: stop.signal,
      });
      return { ...t, scheduled: schedule.length };
    };

    // A short run first, so that connection setup and the first plans are not charged to a trial.
    await trial({ maxRecords: 100, maxAgeMs: 50, idleMs: 50, concurrency: 1 }, Math.min(500, trialMs), 99);
    await reset();

    const estimate = (s: Settings) =>
      trialMs + Math.min(5000, 2 * Math.max(s.maxAgeMs, s.idleMs)) / 4 + OVERHEAD_MS;
    let round1 = firstRound(o.p99Ms, rate);
    // Over budget: drop the smallest batches first (they cost the store the most), then the ages.
    while (round1.length > 2 && round1.reduce((a, s) => a + estimate(s), 0) > budgetMs * 0.7) {
      const smallest = round1.reduce((m, s) => (s.maxRecords < m.maxRecords ? s : m));
      round1 = round1.filter((s) => s !== smallest);
    }
    const round2Max = Math.max(
      0,
      Math.floor((budgetMs - round1.reduce((a, s) => a + estimate(s), 0)) / (trialMs + OVERHEAD_MS)),
    );
    const round2Planned = Math.min(6, round2Max);
    const planned = round1.length + round2Planned;
    o.onProgress?.({
      kind: 'plan',
      trials: planned,
      estimateMs: Math.round(
        round1.reduce((a, s) => a + estimate(s), 0) + round2Planned * (trialMs + OVERHEAD_MS),
      ),
      validateMs,
    });

    const done: (TableTrial & { scheduled: number })[] = [];
    const tried = new Set<string>();
    let total = planned;
    for (const s of round1) {
      halt();
      tried.add(settingsKey(s));
      const t = await trial(s, trialMs, done.length + 1);
      halt();
      done.push(t);
      o.onProgress?.({ kind: 'trial', done: done.length, total, trial: t, round: 1 });
      await reset();
    }
    const target = { p99Ms: o.p99Ms, headroom, rate };
    let ranked = judge(done, fitWriteCost(done.map((t) => t.sums)), target);
    const passing = ranked.filter((t) => t.meets).sort(byCost);
    const seeds = (passing.length > 0 ? passing : [...ranked].sort((a, b) => a.p99Ms - b.p99Ms))
      .slice(0, 2)
      .map((t) => t.settings);
    const round2 = secondRound(seeds, maxConcurrency, tried).slice(0, round2Planned);
    total = round1.length + round2.length;
    for (const s of round2) {
      if (performance.now() - started > budgetMs + trialMs) break;
      halt();
      const t = await trial(s, trialMs, done.length + 1);
      halt();
      done.push(t);
      o.onProgress?.({ kind: 'trial', done: done.length, total, trial: t, round: 2 });
      await reset();
    }
    const writeCost = fitWriteCost(done.map((t) => t.sums));
    ranked = judge(done, writeCost, target);
    let best = recommend(ranked);

    // The validation: the pick once more, for longer. When it misses, the next cheapest setting
    // that met the aim with a lower p99 gets its own run, up to `validateAttempts` runs in all.
    const validations: Validation[] = [];
    if (best && validateMs > 0) {
      let candidate: RankedTrial | undefined = best;
      while (candidate && validations.length < validateAttempts) {
        halt();
        await reset();
        o.onProgress?.({ kind: 'validate', durationMs: validateMs, settings: candidate.settings });
        const v = await trial(candidate.settings, validateMs, 7777 + validations.length);
        halt();
        const why: string[] = [];
        if (v.p99Ms > o.p99Ms) why.push(`p99 ${v.p99Ms} ms > target ${o.p99Ms} ms`);
        if (v.stuck > 0) why.push(`${v.stuck} record(s) not durable after the grace period`);
        if (v.deadLettered > 0) why.push(`${v.deadLettered} record(s) refused by the store`);
        if (v.offered < 0.95 * v.scheduled)
          why.push(`held the load back (${v.offered} of ${v.scheduled} offered)`);
        validations.push({ durationMs: validateMs, trial: v, holds: why.length === 0, why });
        best = candidate;
        if (why.length === 0) break;
        const missed: RankedTrial = candidate;
        candidate = ranked
          .filter(
            (t) =>
              t.meets &&
              t.p99Ms < missed.p99Ms &&
              !validations.some((w) => sameSettings(w.trial.settings, t.settings)),
          )
          .sort(byCost)[0];
      }
    }
    const validation = validations[validations.length - 1];
    return {
      table: `${info.schema}.${info.name}`,
      scratch: scratch.qualified.replace(/"/g, ''),
      server: `PostgreSQL ${server}`,
      mode,
      ...(key ? { key } : {}),
      records: {
        source: set.source,
        generated: !o.sample,
        rows: set.rows.length,
        columns: set.columns,
        ignored: set.ignored,
        defaulted: set.defaulted,
        varied: cycle.variedColumns,
        repeating: cycle.repeating,
      },
      lacks,
      reseeded: scratch.reseeded,
      prefilled,
      load: { shape, rate: round(rate, 1), trialMs },
      target: { p99Ms: o.p99Ms, headroom, aimMs: round(o.p99Ms * (1 - headroom), 1) },
      writeCost: {
        fixedMs: round(writeCost.fixedMs, 4),
        perRecordMs: round(writeCost.perRecordMs, 5),
        writes: writeCost.writes,
      },
      trials: ranked,
      ...(best ? { recommended: best } : {}),
      ...(validation ? { validation, validations } : {}),
      elapsedMs: Math.round(performance.now() - started),
    };
  } finally {
    o.signal?.removeEventListener('abort', external);
    try {
      await scratch?.drop();
    } finally {
      await pool.end().catch(() => undefined);
      process.off('SIGINT', onSignal);
      process.off('SIGTERM', onSignal);
    }
  }
}
