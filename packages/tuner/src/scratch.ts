// The scratch copy the tuner writes to: a schema of its own holding `CREATE TABLE … (LIKE user
// table INCLUDING ALL)`. The user's table is only named in that statement, which reads its
// definition from the catalogs.
import { randomBytes } from 'node:crypto';
import { quoteIdentifier as q } from '@spillway/postgres';
import type pg from 'pg';
import type { TableInfo } from './table-info.js';

export interface ScratchTable {
  schema: string;
  table: string;
  /** `"schema"."table"` */
  qualified: string;
  /** Columns whose default drew from one of the user's sequences and now draws from a scratch one. */
  reseeded: string[];
  /** Empties the copy between trials (TRUNCATE of the copy only). */
  truncate(): Promise<void>;
  /** Drops the scratch schema and everything in it; safe to call twice. */
  drop(): Promise<void>;
}

/** A fresh scratch schema name: `spillway_tune_` and 8 hex digits. */
export function scratchSchemaName(): string {
  return `spillway_tune_${randomBytes(4).toString('hex')}`;
}

/**
 * Creates the scratch schema and the copy. A column default that calls `nextval()` on one of the
 * user's sequences (serial columns) is pointed at a sequence in the scratch schema, or every row the
 * trials write would advance the user's sequence. Identity columns get a new sequence from LIKE
 * itself (PostgreSQL documentation, CREATE TABLE, "LIKE … INCLUDING IDENTITY").
 */
export async function createScratch(
  pool: pg.Pool,
  info: TableInfo,
  schema = scratchSchemaName(),
): Promise<ScratchTable> {
  const qualified = `${q(schema)}.${q(info.name)}`;
  const source = `${q(info.schema)}.${q(info.name)}`;
  let dropped = false;
  const drop = async () => {
    if (dropped) return;
    dropped = true;
    await pool.query(`DROP SCHEMA IF EXISTS ${q(schema)} CASCADE`);
  };
  await pool.query(`CREATE SCHEMA ${q(schema)}`);
  const reseeded: string[] = [];
  try {
    const persistence = info.unlogged ? 'UNLOGGED ' : '';
    await pool.query(`CREATE ${persistence}TABLE ${qualified} (LIKE ${source} INCLUDING ALL)`);
    for (const c of info.columns) {
      if (!c.defaultExpr || !/\bnextval\(/i.test(c.defaultExpr)) continue;
      const seq = `${q(schema)}.${q(`${c.name}_seq`.slice(0, 63))}`;
      await pool.query(`CREATE SEQUENCE ${seq}`);
      await pool.query(
        `ALTER TABLE ${qualified} ALTER COLUMN ${q(c.name)} SET DEFAULT nextval('${seq.replace(/'/g, "''")}'::regclass)`,
      );
      reseeded.push(c.name);
    }
  } catch (error) {
    await drop().catch(() => undefined);
    throw error;
  }
  return {
    schema,
    table: info.name,
    qualified,
    reseeded,
    truncate: async () => void (await pool.query(`TRUNCATE ${qualified}`)),
    drop,
  };
}
