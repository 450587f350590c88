// tuneTable(): picks batch settings on a scratch copy of the user's own PostgreSQL table, with
// the user's rows, write mode, rate and arrival shape, then checks the pick with one more run.
import { invalidOption } from '@spillway/core/kit';
import type pg from 'pg';
import { cannotConnect, redactUrl } from './cannot-connect.js';
import { interruption } from './interrupt.js';
import { prefillScratch } from './prefill.js';
import type { ScratchTable } from './scratch.js';
import type { SearchOutcome } from './search.js';
import { checkSearchOptions, type SearchOptions } from './search-options.js';
import { searchStore } from './store-search.js';
import { copyLacks, resolveKey, type TableInfo } from './table-info.js';
import { planLoad, type TableShape } from './table-load.js';
import type { RecordCycle, RecordSet, TableRow, VariedColumn } from './table-records.js';

export type { TuneTableEvent, Validation } from './search.js';

export type TableMode = 'insert' | 'copy' | 'upsert';

export interface TableTuneOptions extends SearchOptions {
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
  /** Rows written into the copy before measuring. @default 0 */
  prefill?: number;
}

export interface TableTuneOutcome extends SearchOutcome {
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
}

const MODES: readonly TableMode[] = ['insert', 'copy', 'upsert'];

function check(o: TableTuneOptions) {
  if (typeof o.url !== 'string' || !/^postgres(ql)?:/i.test(o.url))
    throw invalidOption('url', 'a postgres:// URL', o.url);
  if (typeof o.table !== 'string' || o.table.trim() === '')
    throw invalidOption('table', 'a table name such as schema.table', o.table);
  if (o.mode !== undefined && !MODES.includes(o.mode))
    throw invalidOption('mode', 'insert, copy or upsert', o.mode);
  if (o.key !== undefined && o.mode !== 'upsert')
    throw invalidOption('key', 'given only with mode upsert', o.key);
  const resolved = checkSearchOptions(o);
  if (o.prefill !== undefined && !(Number.isFinite(o.prefill) && o.prefill >= 0))
    throw invalidOption('prefill', 'a finite number >= 0', o.prefill);
  return resolved;
}

/**
 * Measures batch settings on a scratch copy of `table` and recommends the one that meets the p99
 * target with headroom at the least store time per record. The user's table is only read from
 * the catalogs and named in `CREATE TABLE … (LIKE …)`; every row goes to the copy, which is
 * dropped at the end, on an error, and on SIGINT / SIGTERM.
 */
export async function tuneTable(o: TableTuneOptions): Promise<TableTuneOutcome> {
  const search = check(o);
  const started = performance.now();
  const mode = o.mode ?? 'insert';
  const prefill = Math.floor(o.prefill ?? 0);
  const note = (text: string) => o.onProgress?.({ kind: 'note', text });

  const [{ default: pgModule }, { postgresAdapter }, { inspectTable }, { createScratch }, records] =
    await Promise.all([
      import('pg'),
      import('@spillway/postgres'),
      import('./table-info.js'),
      import('./scratch.js'),
      import('./table-records.js'),
    ]);

  const stop = interruption(o, 'the scratch copy was dropped');
  const halt = stop.halt;
  const pool: pg.Pool = new pgModule.Pool({
    connectionString: o.url,
    max: search.maxConcurrency + 2,
    application_name: 'spillway-tune',
  });
  pool.on('error', () => undefined);
  let scratch: ScratchTable | undefined;
  try {
    const server =
      (
        await pool.query<{ server_version: string }>('SHOW server_version').catch((e: unknown) => {
          throw cannotConnect(`PostgreSQL at ${redactUrl(o.url)}`, e);
        })
      ).rows[0]?.server_version ?? '?';
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
    const load = planLoad(o, set.timesMs);
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

    const outcome = await searchStore({
      options: o,
      search,
      load,
      started,
      stop,
      adapter,
      cycle,
      reset: async () => {
        if (prefill === 0) await scratch!.truncate();
      },
    });
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
      ...outcome,
    };
  } finally {
    try {
      await scratch?.drop();
    } finally {
      await pool.end().catch(() => undefined);
      stop.dispose();
    }
  }
}
