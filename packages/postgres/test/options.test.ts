import pg from 'pg';
import { afterAll, describe, expect, it } from 'vitest';
import { postgresAdapter } from '../src/adapter.js';
import type { PostgresAdapterOptions } from '../src/options.js';
import { resolvePostgresOptions } from '../src/options.js';
import { buildStatements } from '../src/statements.js';

// A pool that is never connected: option checks and SQL text need no server.
const pool = new pg.Pool({ connectionString: 'postgres://127.0.0.1:1/none' });
afterAll(() => pool.end());

interface Dock {
  dockId: string;
  bikes: number;
}
const base: PostgresAdapterOptions<Dock> = {
  pool,
  table: 'dock_status',
  columns: ['dock_id', 'bikes'],
  map: (d) => [d.dockId, d.bikes],
};

describe('postgresAdapter options', () => {
  it('defaults to insert mode, CSV for COPY, and as many rows per statement as 65,535 parameters allow', () => {
    const o = resolvePostgresOptions(base);
    expect(o.mode).toBe('insert');
    expect(o.copyFormat).toBe('csv');
    expect(o.rowsPerStatement).toBe(32_767); // floor(65535 / 2)
  });

  it('never lets maxRowsPerStatement exceed the parameter limit', () => {
    expect(resolvePostgresOptions({ ...base, maxRowsPerStatement: 1_000_000 }).rowsPerStatement).toBe(32_767);
    expect(resolvePostgresOptions({ ...base, maxRowsPerStatement: 500 }).rowsPerStatement).toBe(500);
  });

  it.each([
    [{ pool: {} }, '`pool`'],
    [{ table: '' }, '`table`'],
    [{ table: 'x'.repeat(64) }, '`table`'],
    [{ columns: [] }, '`columns`'],
    [{ columns: ['a', 'a'] }, '`columns[1].name`'],
    [{ columns: [{ name: 'a', type: 'int); DROP TABLE x; --' }] }, '`columns[0].type`'],
    [{ map: 'nope' }, '`map`'],
    [{ mode: 'merge' }, '`mode`'],
    [{ mode: 'upsert' }, '`conflict`'],
    [{ mode: 'upsert', conflict: { key: ['missing'] } }, '`conflict.key[0]`'],
    [{ mode: 'upsert', conflict: { key: ['dock_id'], update: ['dock_id'] } }, '`conflict.update[0]`'],
    [{ mode: 'copy', conflict: { key: ['dock_id'] } }, '`conflict`'],
    [{ copyFormat: 'binary' }, '`copyFormat`'],
    [{ csvLine: (): undefined => undefined }, '`csvLine`'],
    [{ mode: 'copy', copyFormat: 'text', csvLine: (): undefined => undefined }, '`csvLine`'],
    [{ mode: 'copy', csvLine: 'bytes' }, '`csvLine`'],
    [{ upsertViaCopyAbove: -1 }, '`upsertViaCopyAbove`'],
    [{ maxRowsPerStatement: 0 }, '`maxRowsPerStatement`'],
    [{ batchSize: 10 }, '`batchSize`'],
    [{ insertForm: 'unnest' }, '`columns[0].type`'],
    [
      {
        insertForm: 'unnest',
        columns: [
          { name: 'a', type: 'int' },
          { name: 'b', type: 'text[]' },
        ],
      },
      '`columns[1].type`',
    ],
    [{ insertForm: 'rows' }, '`insertForm`'],
  ])('refuses %j with a TypeError naming %s', (patch, name) => {
    expect(() => postgresAdapter({ ...base, ...(patch as object) } as PostgresAdapterOptions<Dock>)).toThrow(
      TypeError,
    );
    expect(() => postgresAdapter({ ...base, ...(patch as object) } as PostgresAdapterOptions<Dock>)).toThrow(
      name,
    );
  });

  it('accepts real type names with precision, arrays and multi-word names', () => {
    const cols = [
      'numeric(10,2)',
      'text[]',
      'timestamp(3) with time zone',
      'character varying(20)',
      'public.citext',
    ].map((type, i) => ({ name: `c${i}`, type }));
    expect(() => postgresAdapter({ ...base, columns: cols, map: () => [1, 2, 3, 4, 5] })).not.toThrow();
  });

  it('updates every non-key column by default and falls back to DO NOTHING when none is left', () => {
    expect(
      resolvePostgresOptions({ ...base, mode: 'upsert', conflict: { key: ['dock_id'] } }).conflict,
    ).toEqual({
      key: ['dock_id'],
      action: 'update',
      update: ['bikes'],
    });
    expect(
      resolvePostgresOptions({ ...base, mode: 'upsert', conflict: { key: ['dock_id', 'bikes'] } }).conflict
        ?.action,
    ).toBe('nothing');
  });
});

describe('SQL text', () => {
  it('quotes every identifier and holds only placeholders, never values', () => {
    const o = resolvePostgresOptions({
      ...base,
      schema: 'tandem',
      table: 'dock "status"',
      mode: 'upsert',
      conflict: { key: ['dock_id'] },
    });
    const sql = buildStatements(o as never);
    expect(sql.values(2)).toBe(
      'INSERT INTO "tandem"."dock ""status""" ("dock_id", "bikes") VALUES ($1,$2),($3,$4) ON CONFLICT ("dock_id") DO UPDATE SET "bikes" = EXCLUDED."bikes"',
    );
    expect(sql.copy(sql.target)).toBe(
      'COPY "tandem"."dock ""status""" ("dock_id", "bikes") FROM STDIN WITH (FORMAT csv)',
    );
    expect(sql.createStage).toMatch(
      /^CREATE TEMP TABLE "spillway_stage_\d+_\d+" ON COMMIT DROP AS SELECT "dock_id", "bikes" FROM "tandem"."dock ""status""" WITH NO DATA$/,
    );
  });

  it('phrases insertForm unnest as one typed array parameter per column', () => {
    const o = resolvePostgresOptions({
      ...base,
      columns: [
        { name: 'dock_id', type: 'text' },
        { name: 'bikes', type: 'int' },
      ],
      insertForm: 'unnest',
    });
    expect(buildStatements(o as never).values(50_000)).toBe(
      'INSERT INTO "dock_status" ("dock_id", "bikes") SELECT * FROM unnest($1::text[], $2::int[])',
    );
  });

  it('numbers placeholders up to exactly the 65,535th in a full statement', () => {
    const o = resolvePostgresOptions({
      ...base,
      columns: ['a', 'b', 'c', 'd', 'e'],
      map: () => [1, 2, 3, 4, 5],
    });
    expect(o.rowsPerStatement).toBe(13_107); // 13,107 × 5 = 65,535
    const sql = buildStatements(o as never).values(o.rowsPerStatement);
    expect(sql.endsWith('$65535)')).toBe(true);
    expect(sql.includes('$65536')).toBe(false);
  });

  it('gives every row count its own numbering, whatever was asked before and by which adapter', () => {
    const expected = (width: number, rows: number) =>
      Array.from(
        { length: rows },
        (_, r) => `(${Array.from({ length: width }, (_, c) => `$${r * width + c + 1}`).join(',')})`,
      ).join(',');
    for (const width of [3, 7]) {
      const columns = Array.from({ length: width }, (_, c) => `c${c}`);
      const one = buildStatements(resolvePostgresOptions({ ...base, columns }) as never);
      const other = buildStatements(resolvePostgresOptions({ ...base, table: 'other', columns }) as never);
      for (const [sql, rows] of [
        [one, 5],
        [one, 1],
        [other, 40],
        [one, 17],
        [other, 3],
        [one, 40],
      ] as const) {
        expect(sql.values(rows)).toBe(
          `INSERT INTO ${sql.target} (${columns.map((c) => `"${c}"`).join(', ')}) VALUES ${expected(width, rows)}`,
        );
      }
    }
  });
});
