// The rows a table trial writes: the user's sample (read by sample-file.ts, mapped to the table's
// columns by name), or rows generated from the column types. Both are cycled through the trials;
// unique columns get a new value on every pass so that an insert does not collide with the rows
// of an earlier pass.
import { basename } from 'node:path';
import { SeededRandom } from './random.js';
import { inputError, readSample, timeOrder } from './sample-file.js';
import { type TableColumn, type TableInfo, writableColumns } from './table-info.js';

/** Values of one row, in the order of `RecordSet.columns`. */
export type TableRow = unknown[];

export interface RecordSet {
  /** Where the rows came from: the sample's file name, or `generated`. */
  source: string;
  /** The table columns written, in row order. */
  columns: string[];
  /** SQL types of those columns (for the upsert staging table). */
  types: string[];
  rows: TableRow[];
  /** Sample fields that are not columns of the table (not written). */
  ignored: string[];
  /** Columns left to their defaults because the sample (or the generator) does not fill them. */
  defaulted: string[];
  /** Arrival offsets of the rows (ms from the first), for `replay`; rows are then in timestamp order. */
  timesMs?: number[];
}

/** What the mode needs of the rows. */
export interface RecordNeeds {
  mode: 'insert' | 'copy' | 'upsert';
  /** The upsert key columns. */
  key?: string[];
  /** The sample field whose timestamps `replay` follows. */
  timestampColumn?: string;
}

/**
 * Reads a CSV or NDJSON sample (format from the extension: .csv, .tsv, .ndjson, .jsonl) and maps
 * its fields to the table's columns by name. A malformed line stops with an error naming the line;
 * a column the table needs (NOT NULL, no default) or an upsert key missing from the sample stops
 * with an error naming the column.
 */
export async function loadSample(path: string, table: TableInfo, needs: RecordNeeds): Promise<RecordSet> {
  const { format, rows, fields: found } = await readSample(path);
  const fields = new Set(found);
  const writable = writableColumns(table);
  const columns = writable.filter((c) => fields.has(c.name));
  const tableNames = new Set(table.columns.map((c) => c.name));
  const ignored = [...fields].filter((f) => !tableNames.has(f));
  const missing = writable.filter((c) => !fields.has(c.name) && needsValue(c));
  if (missing.length > 0)
    throw inputError(
      `--sample ${basename(path)} has no field ${missing.map((c) => `"${c.name}"`).join(', ')}, which ${table.schema}.${table.name} requires (NOT NULL, no default)`,
      { sample: path, columns: missing.map((c) => c.name) },
    );
  for (const k of needs.key ?? [])
    if (!fields.has(k))
      throw inputError(`--sample ${basename(path)} has no field "${k}", the upsert key (--key)`, {
        sample: path,
        column: k,
      });
  if (needs.timestampColumn !== undefined && !fields.has(needs.timestampColumn))
    throw inputError(
      `--sample ${basename(path)} has no field "${needs.timestampColumn}" (--timestamp-column) to replay`,
      { sample: path, column: needs.timestampColumn },
    );
  if (columns.length === 0)
    throw inputError(
      `--sample ${basename(path)}: none of its fields is a column of ${table.schema}.${table.name}`,
      {
        sample: path,
      },
    );
  // CSV gives text: an empty field is NULL, as @spillway/ingest treats it.
  const value = (v: unknown) => (v === '' && format === 'csv' ? null : (v ?? null));
  let mapped = rows.map((r) => columns.map((c) => value(Object.hasOwn(r, c.name) ? r[c.name] : null)));
  let timesMs: number[] | undefined;
  if (needs.timestampColumn !== undefined) {
    const timed = timeOrder(rows, needs.timestampColumn, path);
    mapped = timed.order.map((i) => mapped[i]!);
    timesMs = timed.timesMs;
  }
  return {
    source: basename(path),
    columns: columns.map((c) => c.name),
    types: columns.map((c) => c.type),
    rows: mapped,
    ignored,
    defaulted: writable.filter((c) => !fields.has(c.name)).map((c) => c.name),
    ...(timesMs ? { timesMs } : {}),
  };
}

/** A column a row must fill: NOT NULL, no default, not an identity. */
function needsValue(c: TableColumn): boolean {
  return c.notNull && c.defaultExpr === undefined && c.identity === '';
}

/**
 * Rows made from the column types, for a table without a sample: every writable column without a
 * default (a column with one is left to it, as an application usually does), values drawn from a
 * seeded source. Throws naming the column when its type has no generator.
 */
export function generateRows(table: TableInfo, count: number, seed = 1): RecordSet {
  const writable = writableColumns(table);
  const columns = writable.filter((c) => c.defaultExpr === undefined && c.identity === '');
  const rnd = new SeededRandom(seed);
  const makers = columns.map((c) => generator(c, rnd, table));
  const rows: TableRow[] = [];
  for (let i = 0; i < count; i++) rows.push(makers.map((m) => m(i)));
  return {
    source: 'generated',
    columns: columns.map((c) => c.name),
    types: columns.map((c) => c.type),
    rows,
    ignored: [],
    defaulted: writable.filter((c) => !columns.includes(c)).map((c) => c.name),
  };
}

function generator(c: TableColumn, rnd: SeededRandom, table: TableInfo): (i: number) => unknown {
  const length = Number(/\((\d+)\)/.exec(c.type)?.[1] ?? 24);
  const text = (i: number) => `${c.name.slice(0, 8)}-${i}-${rnd.int(1e6).toString(36)}`.slice(0, length);
  const base = c.typeName;
  switch (base) {
    case 'int2':
      return (i) => i % 32_000;
    case 'int4':
    case 'int8':
    case 'numeric':
      return (i) => i;
    case 'float4':
    case 'float8':
      return () => Math.round(rnd.next() * 1e6) / 100;
    case 'bool':
      return () => rnd.next() < 0.5;
    case 'text':
    case 'varchar':
    case 'bpchar':
    case 'citext':
      return text;
    case 'timestamptz':
    case 'timestamp':
      return (i) => new Date(Date.UTC(2026, 0, 1) + i * 1000).toISOString();
    case 'date':
      return (i) => new Date(Date.UTC(2026, 0, 1) + (i % 3650) * 86_400_000).toISOString().slice(0, 10);
    case 'uuid':
      return (i) => uuidOf(i, rnd);
    case 'json':
    case 'jsonb':
      return (i) => ({ n: i, note: text(i) });
    case 'bytea':
      return () => Buffer.from(Array.from({ length: 16 }, () => rnd.int(256)));
    default:
      throw inputError(
        `Cannot generate values of type ${c.type} for column "${c.name}" of ${table.schema}.${table.name}: give a --sample file`,
        { column: c.name, type: c.type },
      );
  }
}

function uuidOf(i: number, rnd: SeededRandom): string {
  const hex = (n: number, w: number) => n.toString(16).padStart(w, '0').slice(-w);
  return `${hex(rnd.int(2 ** 32), 8)}-${hex(rnd.int(65536), 4)}-4${hex(rnd.int(4096), 3)}-a${hex(rnd.int(4096), 3)}-${hex(i, 12)}`;
}

/** A column whose value changes on each pass over the rows, and how. */
export interface VariedColumn {
  name: string;
  how: 'offset' | 'suffix' | 'uuid';
}

/**
 * Hands out the rows one after another, around and around. On pass p ≥ 1 the values of the varied
 * columns (the columns of the table's unique keys, except the upsert key, which is meant to
 * repeat) change: integers move by p × (their span in the rows), text gains `#p`, a uuid's last
 * twelve hex digits move by p. The position carries on across trials, so no pass repeats.
 */
export class RecordCycle {
  private position = 0;
  private readonly varied: { index: number; how: VariedColumn['how']; span: bigint }[];
  /** Unique-key columns whose type has no way to vary: their values repeat after one pass. */
  readonly repeating: string[] = [];
  readonly variedColumns: VariedColumn[] = [];

  constructor(
    readonly set: RecordSet,
    table: TableInfo,
    needs: RecordNeeds,
  ) {
    const key = new Set(needs.mode === 'upsert' ? (needs.key ?? []) : []);
    const unique = new Set(table.uniqueKeys.flat().filter((c) => !key.has(c)));
    this.varied = [];
    set.columns.forEach((name, index) => {
      if (!unique.has(name)) return;
      const col = table.columns.find((c) => c.name === name)!;
      const how = variation(col.typeName);
      if (!how) {
        this.repeating.push(name);
        return;
      }
      let span = 1n;
      if (how === 'offset') {
        let lo: bigint | undefined;
        let hi: bigint | undefined;
        for (const r of set.rows) {
          const v = asBigInt(r[index]);
          if (v === undefined) continue;
          if (lo === undefined || v < lo) lo = v;
          if (hi === undefined || v > hi) hi = v;
        }
        span = lo === undefined || hi === undefined ? 1n : hi - lo + 1n;
      }
      this.varied.push({ index, how, span });
      this.variedColumns.push({ name, how });
    });
  }

  /** How many rows one pass holds. */
  get size(): number {
    return this.set.rows.length;
  }

  /** Index of the next row within its pass. */
  get offset(): number {
    return this.position % this.set.rows.length;
  }

  next(): TableRow {
    const n = this.set.rows.length;
    const pass = Math.floor(this.position / n);
    const row = this.set.rows[this.position % n]!;
    this.position++;
    if (pass === 0 || this.varied.length === 0) return row;
    const out = [...row];
    for (const v of this.varied) {
      const value = out[v.index];
      if (value === null || value === undefined) continue;
      out[v.index] = vary(value, v.how, v.span, pass);
    }
    return out;
  }
}

function variation(typeName: string): VariedColumn['how'] | undefined {
  if (['int2', 'int4', 'int8', 'numeric'].includes(typeName)) return 'offset';
  if (['text', 'varchar', 'bpchar', 'citext'].includes(typeName)) return 'suffix';
  if (typeName === 'uuid') return 'uuid';
  return undefined;
}

function asBigInt(v: unknown): bigint | undefined {
  if (typeof v === 'number' && Number.isInteger(v)) return BigInt(v);
  if (typeof v === 'string' && /^[+-]?\d+$/.test(v.trim())) return BigInt(v.trim());
  if (typeof v === 'bigint') return v;
  return undefined;
}

function vary(value: unknown, how: VariedColumn['how'], span: bigint, pass: number): unknown {
  switch (how) {
    case 'offset': {
      const b = asBigInt(value);
      return b === undefined ? value : (b + span * BigInt(pass)).toString();
    }
    case 'suffix':
      return `${String(value)}#${pass}`;
    case 'uuid': {
      const s = String(value);
      const tail = BigInt(`0x${s.slice(-12)}`);
      const moved = ((tail + BigInt(pass)) % 0x1000000000000n).toString(16).padStart(12, '0');
      return `${s.slice(0, -12)}${moved}`;
    }
  }
}
