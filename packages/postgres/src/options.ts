import { countOption, functionOption, invalidOption, knownOptions } from '@spillway/core/kit';
import type { Pool } from 'pg';

/**
 * How a batch reaches its table.
 * - `insert`: multi-row parameterised `INSERT … VALUES`, split so that no statement binds more
 *   than 65,535 parameters.
 * - `copy`: `COPY … FROM STDIN` (fastest append; no conflict handling).
 * - `upsert`: `INSERT … ON CONFLICT (key) DO UPDATE | DO NOTHING`; large batches are copied
 *   into a temporary table first and then merged with one `INSERT … SELECT … ON CONFLICT`.
 */
export type PostgresMode = 'insert' | 'copy' | 'upsert';

/** COPY data format (PostgreSQL documentation, COPY, "File Formats"). */
export type CopyFormat = 'csv' | 'text';

/** How `insert` (and small `upsert`) batches are phrased. */
export type InsertForm = 'values' | 'unnest';

/** A target column, with its SQL type when one is needed. */
export interface ColumnSpec {
  /** Column name as it is in the table (case and spaces kept; it is always quoted). */
  readonly name: string;
  /**
   * SQL type of the column, e.g. `int`, `text`, `timestamptz`, `jsonb`. Used to declare the
   * staging table of `upsert` batches that go through COPY; when every column has a type the
   * staging table is declared from them, otherwise it is cloned from the target table.
   * @default undefined (the server takes the type from the target column)
   * @example { name: 'seen_at', type: 'timestamptz' }
   */
  readonly type?: string;
}

/** What `upsert` does when a row with the same key exists. */
export interface ConflictOptions {
  /**
   * The conflict target: columns of a unique index or primary key, in any order.
   * @example { key: ['dock_id'] }
   */
  readonly key: readonly string[];
  /**
   * `update`: overwrite the `update` columns of the existing row (`DO UPDATE SET c = EXCLUDED.c`);
   * `nothing`: keep the existing row (`DO NOTHING`).
   * @default 'update'
   * @example { key: ['dock_id'], action: 'nothing' }
   */
  readonly action?: 'update' | 'nothing';
  /**
   * Columns overwritten on conflict. When empty (every column is part of the key) the action is
   * `DO NOTHING`, as there is nothing to update.
   * @default every column that is not part of `key`
   * @example { key: ['dock_id'], update: ['bikes', 'empty_slots', 'seen_at'] }
   */
  readonly update?: readonly string[];
}

/** Where and under which consumer group the adapter keeps the offsets it stores with the data. */
export interface StoreOffsetsOptions {
  /**
   * The consumer group of the Kafka bridge that feeds this sink (the bridge's `groupId`).
   * @example 'dock-status-writer'
   */
  readonly group: string;
  /**
   * The progress table the adapter creates (if missing) and owns: one row per consumer group,
   * target table, topic and partition, holding the next offset to read.
   * @default 'spillway_offsets'
   * @example 'dock_status_offsets'
   */
  readonly table?: string;
  /**
   * Schema of the progress table.
   * @default the adapter's `schema` (or the search_path when none)
   * @example 'tandem'
   */
  readonly schema?: string;
}

export interface PostgresAdapterOptions<T> {
  /**
   * The application's `pg` Pool. The adapter borrows one client per batch and never ends the
   * pool (the application owns it). It adds an `'error'` listener to the pool, so that a server
   * restart that kills idle connections cannot crash the process; `close()` removes it.
   * @example new pg.Pool({ connectionString: process.env.DATABASE_URL, max: 4 })
   */
  readonly pool: Pool;
  /**
   * Target table. Always quoted as an identifier, so it is taken literally (case, spaces, quotes).
   * @example 'dock_status'
   */
  readonly table: string;
  /**
   * Schema of the table. Without one the table is found through the connection's `search_path`.
   * @default undefined (search_path)
   * @example 'tandem'
   */
  readonly schema?: string;
  /**
   * Target columns, in the order `map` returns values. Strings or `{ name, type }`.
   * @example ['dock_id', 'bikes', 'empty_slots', { name: 'seen_at', type: 'timestamptz' }]
   */
  readonly columns: ReadonlyArray<string | ColumnSpec>;
  /**
   * Turns a record into one value per column, in column order. `null` / `undefined` become SQL
   * NULL; strings, numbers, bigints and booleans are sent as text; a `Date` as ISO 8601 UTC; a
   * `Buffer` / `Uint8Array` as bytea; an array as a PostgreSQL array literal; other objects as
   * JSON. A record whose `map` throws, or returns the wrong number of values, is rejected on its
   * own (dead-lettered) and the rest of the batch is written.
   * @example (e) => [e.dockId, e.bikes, e.emptySlots, new Date(e.at)]
   */
  readonly map: (record: T) => readonly unknown[];
  /**
   * How batches are written. See `PostgresMode`.
   * @default 'insert'
   * @example 'copy'
   */
  readonly mode?: PostgresMode;
  /**
   * Conflict handling; required by `upsert` and refused by the other modes.
   * @default undefined
   * @example { key: ['dock_id'], action: 'update' }
   */
  readonly conflict?: ConflictOptions;
  /**
   * Data format of COPY (`copy` mode, and `upsert` batches that go through COPY). Both round-trip
   * every value; CSV is cheaper to generate in JavaScript.
   * @default 'csv'
   * @example 'text'
   */
  readonly copyFormat?: CopyFormat;
  /**
   * `copy` mode with `copyFormat: 'csv'`: the record's COPY line when the record already holds one,
   * sent as it is instead of going through `map` and the encoder. The bytes must be one CSV record
   * as COPY reads it (PostgreSQL documentation, COPY, "CSV Format"): UTF-8, the fields of
   * `columns` in order separated by commas, no line break outside quotes, NULL as an unquoted
   * empty field, and not a lone `\.` — or several such records separated by LF (a record that
   * stands for several rows; one failing row fails the record). Return `undefined` for a record
   * that must be mapped. For producers that hold valid CSV already, such as an upload read by
   * `@spillway/ingest`.
   * @default undefined
   * @example (r) => (r instanceof Uint8Array ? r : undefined)
   */
  readonly csvLine?: ((record: T) => Uint8Array | undefined) | undefined;
  /**
   * `upsert` batches with more rows than this are copied into a temporary table and merged with
   * one `INSERT … SELECT … ON CONFLICT`; smaller ones use multi-row `INSERT … ON CONFLICT`.
   * `Infinity` never uses COPY.
   * @default 1000
   * @example 5000
   */
  readonly upsertViaCopyAbove?: number | undefined;
  /**
   * Statement form of `insert` batches (and of `upsert` batches at or below `upsertViaCopyAbove`).
   * `values`: multi-row `INSERT … VALUES ($1, …), (…)`, split so that no statement binds more than
   * 65,535 parameters. `unnest`: `INSERT … SELECT * FROM unnest($1::type[], …)`, one array
   * parameter per column and one statement per batch; it needs a `type` for every column and no
   * array-typed column (unnest would flatten it).
   * @default 'values'
   * @example 'unnest'
   */
  readonly insertForm?: InsertForm;
  /**
   * Upper bound on rows per INSERT statement (`insert`, and `upsert` below `upsertViaCopyAbove`).
   * The adapter never binds more than 65,535 parameters in one statement whatever this says
   * (the Bind message counts parameters in an Int16).
   * @default floor(65535 / columns.length)
   * @example 2000
   */
  readonly maxRowsPerStatement?: number;
  /**
   * Exactly-once from a Kafka bridge: each batch's transaction also stores, for every source
   * partition in the batch, the next offset to read, so that rows and offsets commit together or
   * not at all. A Kafka bridge given this sink in `offsetStores` skips what is stored on
   * assignment. Records without Kafka metadata are written as usual and store nothing.
   * @default undefined (at-least-once)
   * @example { group: 'dock-status-writer' }
   */
  readonly storeOffsets?: StoreOffsetsOptions;
}

/** Options after defaults and validation. */
export interface ResolvedPostgresOptions<T> {
  pool: Pool;
  table: string;
  schema: string | undefined;
  columns: ColumnSpec[];
  map: (record: T) => readonly unknown[];
  mode: PostgresMode;
  conflict: { key: string[]; action: 'update' | 'nothing'; update: string[] } | undefined;
  copyFormat: CopyFormat;
  csvLine: ((record: T) => Uint8Array | undefined) | undefined;
  upsertViaCopyAbove: number;
  insertForm: InsertForm;
  rowsPerStatement: number;
  storeOffsets: { group: string; table: string; schema: string | undefined } | undefined;
}

/** The Bind message carries the parameter count as an Int16 (PostgreSQL protocol, "Bind"). */
export const MAX_PARAMETERS = 65_535;

export const POSTGRES_DEFAULTS = {
  mode: 'insert',
  copyFormat: 'csv',
  upsertViaCopyAbove: 1000,
  insertForm: 'values',
} as const;

const KNOWN = new Set([
  'pool',
  'table',
  'schema',
  'columns',
  'map',
  'mode',
  'conflict',
  'copyFormat',
  'csvLine',
  'upsertViaCopyAbove',
  'insertForm',
  'maxRowsPerStatement',
  'storeOffsets',
]);

/** Names of the adapter's own options (the rest of a `postgresSink` options object goes to the Sink). */
export const ADAPTER_OPTION_NAMES: ReadonlySet<string> = KNOWN;

// PostgreSQL truncates longer identifiers (NAMEDATALEN - 1 bytes), which could silently point a
// write at another column; refuse them instead.
const MAX_IDENTIFIER_BYTES = 63;

// Type names go into DDL text: allow the shapes of real type names and nothing that could
// close a parenthesis or start another clause.
const TYPE_NAME =
  /^[A-Za-z_][A-Za-z0-9_]*(\.[A-Za-z_][A-Za-z0-9_]*)?( [A-Za-z_][A-Za-z0-9_]*)*(\(\s*\d+\s*(,\s*\d+\s*)?\))?( [A-Za-z_][A-Za-z0-9_]*)*(\[\d*\])*$/;

function identifier(name: string, value: unknown): string {
  if (typeof value !== 'string' || value.length === 0) throw invalidOption(name, 'a non-empty string', value);
  if (value.includes('\0')) throw invalidOption(name, 'a name without NUL characters', value);
  if (Buffer.byteLength(value, 'utf8') > MAX_IDENTIFIER_BYTES) {
    throw invalidOption(
      name,
      `a name of at most ${MAX_IDENTIFIER_BYTES} bytes (PostgreSQL truncates longer ones)`,
      value,
    );
  }
  return value;
}

function nameList(name: string, value: unknown, columns: ReadonlySet<string>, allowEmpty: boolean): string[] {
  if (!Array.isArray(value) || (!allowEmpty && value.length === 0)) {
    throw invalidOption(name, `${allowEmpty ? 'an' : 'a non-empty'} array of column names`, value);
  }
  const seen = new Set<string>();
  for (const [i, v] of value.entries()) {
    if (typeof v !== 'string' || !columns.has(v)) throw invalidOption(`${name}[${i}]`, 'one of `columns`', v);
    if (seen.has(v)) throw invalidOption(`${name}[${i}]`, 'a column named once', v);
    seen.add(v);
  }
  return [...seen];
}

/** Applies defaults and validates; throws a `TypeError` naming the first bad option. */
export function resolvePostgresOptions<T>(options: PostgresAdapterOptions<T>): ResolvedPostgresOptions<T> {
  if (options === undefined) throw invalidOption('options', 'an object', options);
  const o = knownOptions(options, KNOWN);
  const pool = o.pool as Pool | undefined;
  if (
    typeof pool !== 'object' ||
    pool === null ||
    typeof pool.connect !== 'function' ||
    typeof pool.on !== 'function'
  ) {
    throw invalidOption('pool', 'a pg Pool (an object with connect() and on())', pool);
  }
  const table = identifier('table', o.table);
  const schema = o.schema === undefined ? undefined : identifier('schema', o.schema);

  if (!Array.isArray(o.columns) || o.columns.length === 0) {
    throw invalidOption('columns', 'a non-empty array of column names or { name, type } objects', o.columns);
  }
  const columns: ColumnSpec[] = [];
  const names = new Set<string>();
  for (const [i, c] of (o.columns as unknown[]).entries()) {
    const spec = typeof c === 'string' ? { name: c } : c;
    if (typeof spec !== 'object' || spec === null)
      throw invalidOption(`columns[${i}]`, 'a column name or { name, type }', c);
    const { name, type } = spec as { name?: unknown; type?: unknown };
    const n = identifier(`columns[${i}].name`, name);
    if (names.has(n)) throw invalidOption(`columns[${i}].name`, 'a column named once', n);
    if (type !== undefined && (typeof type !== 'string' || !TYPE_NAME.test(type))) {
      throw invalidOption(
        `columns[${i}].type`,
        'a SQL type name such as "int", "numeric(10,2)" or "text[]"',
        type,
      );
    }
    names.add(n);
    columns.push(type === undefined ? { name: n } : { name: n, type: type as string });
  }

  if (typeof o.map !== 'function')
    throw invalidOption('map', 'a function (record) => values in column order', o.map);

  const mode = (o.mode ?? POSTGRES_DEFAULTS.mode) as PostgresMode;
  if (mode !== 'insert' && mode !== 'copy' && mode !== 'upsert') {
    throw invalidOption('mode', '"insert", "copy" or "upsert"', o.mode);
  }

  let conflict: ResolvedPostgresOptions<T>['conflict'];
  if (mode === 'upsert') {
    const c = o.conflict as Record<string, unknown> | undefined;
    if (typeof c !== 'object' || c === null)
      throw invalidOption('conflict', 'an object { key, action?, update? } in upsert mode', c);
    const key = nameList('conflict.key', c.key, names, false);
    const action = (c.action ?? 'update') as 'update' | 'nothing';
    if (action !== 'update' && action !== 'nothing')
      throw invalidOption('conflict.action', '"update" or "nothing"', c.action);
    const update =
      c.update === undefined
        ? columns.map((x) => x.name).filter((n) => !key.includes(n))
        : nameList('conflict.update', c.update, names, true);
    for (const [i, u] of update.entries()) {
      if (key.includes(u))
        throw invalidOption(`conflict.update[${i}]`, 'a column that is not part of conflict.key', u);
    }
    if (action === 'nothing' && c.update !== undefined)
      throw invalidOption('conflict.update', 'undefined when action is "nothing"', c.update);
    conflict = {
      key,
      action: update.length === 0 ? 'nothing' : action,
      update: action === 'nothing' ? [] : update,
    };
  } else if (o.conflict !== undefined) {
    throw invalidOption('conflict', 'undefined unless mode is "upsert"', o.conflict);
  }

  const copyFormat = (o.copyFormat ?? POSTGRES_DEFAULTS.copyFormat) as CopyFormat;
  if (copyFormat !== 'csv' && copyFormat !== 'text')
    throw invalidOption('copyFormat', '"csv" or "text"', o.copyFormat);
  const csvLine = functionOption<(record: T) => Uint8Array | undefined>('csvLine', o.csvLine);
  if (csvLine !== undefined && (mode !== 'copy' || copyFormat !== 'csv'))
    throw invalidOption('csvLine', 'undefined unless mode is "copy" and copyFormat "csv"', o.csvLine);

  const upsertViaCopyAbove = countOption(
    'upsertViaCopyAbove',
    o.upsertViaCopyAbove,
    POSTGRES_DEFAULTS.upsertViaCopyAbove,
    { min: 0, allowInfinity: true },
  );
  const insertForm = (o.insertForm ?? POSTGRES_DEFAULTS.insertForm) as InsertForm;
  if (insertForm !== 'values' && insertForm !== 'unnest')
    throw invalidOption('insertForm', '"values" or "unnest"', o.insertForm);
  if (insertForm === 'unnest') {
    for (const [i, c] of columns.entries()) {
      if (c.type === undefined)
        throw invalidOption(
          `columns[${i}].type`,
          'a SQL type (insertForm "unnest" casts one array per column)',
          c.type,
        );
      if (c.type.endsWith(']'))
        throw invalidOption(
          `columns[${i}].type`,
          'a non-array type (unnest flattens arrays; use insertForm "values")',
          c.type,
        );
    }
  }
  const limit = Math.floor(MAX_PARAMETERS / columns.length);
  if (limit < 1) throw invalidOption('columns', `at most ${MAX_PARAMETERS} columns`, columns.length);
  const rowsPerStatement = countOption('maxRowsPerStatement', o.maxRowsPerStatement, limit);

  let storeOffsets: ResolvedPostgresOptions<T>['storeOffsets'];
  if (o.storeOffsets !== undefined) {
    const so = o.storeOffsets as Record<string, unknown> | null;
    if (typeof so !== 'object' || so === null)
      throw invalidOption('storeOffsets', 'an object { group, table?, schema? }', o.storeOffsets);
    for (const key of Object.keys(so)) {
      if (key !== 'group' && key !== 'table' && key !== 'schema')
        throw invalidOption(`storeOffsets.${key}`, 'one of group, table, schema', so[key]);
    }
    if (typeof so.group !== 'string' || so.group.length === 0)
      throw invalidOption('storeOffsets.group', 'a non-empty string (the consumer group id)', so.group);
    storeOffsets = {
      group: so.group,
      table: so.table === undefined ? 'spillway_offsets' : identifier('storeOffsets.table', so.table),
      schema: so.schema === undefined ? schema : identifier('storeOffsets.schema', so.schema),
    };
  }

  return {
    storeOffsets,
    pool,
    table,
    schema,
    columns,
    map: o.map as (record: T) => readonly unknown[],
    mode,
    conflict,
    copyFormat,
    csvLine,
    upsertViaCopyAbove,
    insertForm,
    // The protocol bound wins over a larger request; unnest binds one array per column, whatever the rows.
    rowsPerStatement: insertForm === 'unnest' ? Number.MAX_SAFE_INTEGER : Math.min(rowsPerStatement, limit),
  };
}
