// What the tuner knows about the user's table, read from the system catalogs only: no query here
// scans or locks the table itself, so its pg_stat_user_tables counters do not move.
import { invalidOption } from '@spillway/core/kit';
import type pg from 'pg';

export interface TableColumn {
  name: string;
  /** As `format_type` prints it, e.g. `character varying(40)`, `timestamp with time zone`. */
  type: string;
  /** The base type's name in pg_type, e.g. `varchar`, `int4`, `timestamptz`, `_int4`. */
  typeName: string;
  notNull: boolean;
  /** The default expression, if any. */
  defaultExpr: string | undefined;
  /** 'a' (GENERATED ALWAYS AS IDENTITY), 'd' (BY DEFAULT), or ''. */
  identity: string;
  /** A stored generated column: never written. */
  generated: boolean;
}

export interface TableInfo {
  schema: string;
  name: string;
  oid: number;
  columns: TableColumn[];
  /** Column sets of every unique index, the primary key first. */
  uniqueKeys: string[][];
  /** Secondary and unique indexes, as `CREATE INDEX` statements. */
  indexes: string[];
  checks: string[];
  /** Foreign keys, as `name → referenced table`. */
  foreignKeys: string[];
  /** Triggers the user created (internal ones of constraints excluded). */
  triggers: string[];
  /** The planner's estimate of the rows the table holds (pg_class.reltuples); -1 when never analysed. */
  estimatedRows: number;
  partitioned: boolean;
  unlogged: boolean;
}

/**
 * Finds the table named `schema.table` (or `table` on the search path; quoted identifiers as in
 * SQL) and reads its shape. Throws a TypeError naming the table when there is none.
 */
export async function inspectTable(pool: pg.Pool, qualified: string): Promise<TableInfo> {
  // to_regclass looks the name up without locking it and answers NULL for an unknown one.
  const found = await pool
    .query<{ oid: number | null }>('SELECT to_regclass($1)::oid AS oid', [qualified])
    .catch((e: Error) => {
      throw invalidOption('table', `a table name such as schema.table (${e.message})`, qualified);
    });
  const oid = found.rows[0]?.oid;
  if (oid === null || oid === undefined)
    throw invalidOption(
      'table',
      'an existing table (schema.table, or a table on the search path)',
      qualified,
    );
  const rel = (
    await pool.query<{
      schema: string;
      name: string;
      relkind: string;
      reltuples: number;
      relpersistence: string;
    }>(
      `SELECT n.nspname AS schema, c.relname AS name, c.relkind, c.reltuples::float8 AS reltuples, c.relpersistence
         FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace WHERE c.oid = $1`,
      [oid],
    )
  ).rows[0]!;
  if (rel.relkind !== 'r' && rel.relkind !== 'p')
    throw invalidOption('table', 'a table (not a view, index or sequence)', qualified);
  const columns = (
    await pool.query<{
      name: string;
      type: string;
      type_name: string;
      not_null: boolean;
      default_expr: string | null;
      identity: string;
      generated: string;
    }>(
      `SELECT a.attname AS name, format_type(a.atttypid, a.atttypmod) AS type, t.typname AS type_name,
              a.attnotnull AS not_null, pg_get_expr(d.adbin, d.adrelid) AS default_expr,
              a.attidentity AS identity, a.attgenerated AS generated
         FROM pg_attribute a
         JOIN pg_type t ON t.oid = a.atttypid
         LEFT JOIN pg_attrdef d ON d.adrelid = a.attrelid AND d.adnum = a.attnum
        WHERE a.attrelid = $1 AND a.attnum > 0 AND NOT a.attisdropped
        ORDER BY a.attnum`,
      [oid],
    )
  ).rows.map(
    (r): TableColumn => ({
      name: r.name,
      type: r.type,
      typeName: r.type_name,
      notNull: r.not_null,
      defaultExpr: r.generated === '' ? (r.default_expr ?? undefined) : undefined,
      identity: r.identity,
      generated: r.generated !== '',
    }),
  );
  const indexRows = (
    await pool.query<{ def: string; unique: boolean; cols: string[] }>(
      `SELECT pg_get_indexdef(i.indexrelid) AS def, i.indisunique AS unique,
              ARRAY(SELECT a.attname::text FROM unnest(i.indkey) AS k(n)
                      JOIN pg_attribute a ON a.attrelid = i.indrelid AND a.attnum = k.n) AS cols
         FROM pg_index i WHERE i.indrelid = $1 ORDER BY i.indisprimary DESC, i.indexrelid`,
      [oid],
    )
  ).rows;
  const constraints = (
    await pool.query<{ name: string; type: string; def: string; ref: string | null }>(
      `SELECT conname AS name, contype AS type, pg_get_constraintdef(oid) AS def,
              CASE WHEN confrelid <> 0 THEN confrelid::regclass::text END AS ref
         FROM pg_constraint WHERE conrelid = $1 ORDER BY conname`,
      [oid],
    )
  ).rows;
  const triggers = (
    await pool.query<{ name: string }>(
      'SELECT tgname AS name FROM pg_trigger WHERE tgrelid = $1 AND NOT tgisinternal ORDER BY tgname',
      [oid],
    )
  ).rows.map((r) => r.name);
  return {
    schema: rel.schema,
    name: rel.name,
    oid,
    columns,
    // Expression indexes have a 0 in indkey: their column list is partial, so they are left out.
    uniqueKeys: indexRows.filter((i) => i.unique && i.cols.length > 0).map((i) => i.cols),
    indexes: indexRows.map((i) => i.def),
    checks: constraints.filter((c) => c.type === 'c').map((c) => `${c.name}: ${c.def}`),
    foreignKeys: constraints.filter((c) => c.type === 'f').map((c) => `${c.name} → ${c.ref}`),
    triggers,
    estimatedRows: rel.reltuples,
    partitioned: rel.relkind === 'p',
    unlogged: rel.relpersistence === 'u',
  };
}

/** The columns a writer supplies: not generated, not GENERATED ALWAYS AS IDENTITY. */
export function writableColumns(t: TableInfo): TableColumn[] {
  return t.columns.filter((c) => !c.generated && c.identity !== 'a');
}

/** What the scratch copy does not have, in the words the output uses. */
export function copyLacks(t: TableInfo): string[] {
  const out: string[] = [];
  for (const fk of t.foreignKeys) out.push(`foreign key ${fk} (not checked on the copy)`);
  for (const tg of t.triggers) out.push(`trigger ${tg} (does not fire on the copy)`);
  if (t.partitioned) out.push('partitioning (the copy is one plain table)');
  if (t.estimatedRows > 0)
    out.push(
      `the table's ~${Math.round(t.estimatedRows).toLocaleString('en-US')} existing rows (planner estimate; the copy starts empty: --prefill N fills it first)`,
    );
  return out;
}

/** The upsert key: the one given (it must be a unique key of the table), else the primary key (or, without one, the first unique key). */
export function resolveKey(info: TableInfo, given: string[] | undefined): string[] {
  const keys = info.uniqueKeys;
  const show = keys.map((k) => `(${k.join(', ')})`).join(', ') || 'none';
  if (given === undefined || given.length === 0) {
    const first = keys[0];
    if (!first)
      throw invalidOption(
        'key',
        `the conflict columns for upsert (${info.schema}.${info.name} has no unique key)`,
        given,
      );
    return first;
  }
  const unknown = given.filter((k) => !info.columns.some((c) => c.name === k));
  if (unknown.length > 0)
    throw invalidOption(
      'key',
      `columns of ${info.schema}.${info.name} (no column ${unknown.map((k) => `"${k}"`).join(', ')})`,
      given,
    );
  const same = (k: string[]) => k.length === given.length && k.every((c) => given.includes(c));
  if (!keys.some(same))
    throw invalidOption(
      'key',
      `the columns of a unique index or primary key of ${info.schema}.${info.name}: ${show}`,
      given,
    );
  return given;
}
