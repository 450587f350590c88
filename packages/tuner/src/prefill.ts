// Rows written into the scratch copy before measuring, for a table that holds many already.
import type pg from 'pg';
import type { ScratchTable } from './scratch.js';
import type { RecordCycle, RecordSet, TableRow } from './table-records.js';

/**
 * Writes up to `count` rows from `cycle` into the copy, 5,000 per statement through
 * json_populate_recordset. The cycle varies every unique column from pass to pass (the upsert key
 * too), and a row that still collides (the sample repeats a key within a pass) is skipped (ON
 * CONFLICT DO NOTHING): the copy gets `count` distinct rows, or as many as the rows can make.
 * Returns how many landed. `halt` throws when the tune was interrupted.
 */
export async function prefillScratch(
  pool: pg.Pool,
  scratch: ScratchTable,
  set: RecordSet,
  cycle: RecordCycle,
  count: number,
  halt: () => void,
): Promise<number> {
  const target = scratch.qualified;
  const cols = set.columns.map((c) => `"${c.replace(/"/g, '""')}"`).join(', ');
  let landed = 0;
  // Rows tried since the last one that landed: two passes without one means no more can.
  let barren = 0;
  while (landed < count && barren < 2 * set.rows.length) {
    halt();
    const n = Math.min(5000, count - landed);
    const rows = Array.from({ length: n }, () => jsonRow(set.columns, cycle.next()));
    const r = await pool.query(
      `INSERT INTO ${target} (${cols}) SELECT ${cols} FROM json_populate_recordset(NULL::${target}, $1) ON CONFLICT DO NOTHING`,
      [JSON.stringify(rows)],
    );
    landed += r.rowCount ?? 0;
    barren = (r.rowCount ?? 0) === 0 ? barren + n : 0;
  }
  await pool.query(`ANALYZE ${target}`);
  return landed;
}

/** A row as the JSON object json_populate_recordset reads: bytea as `\\x…` hex text. */
function jsonRow(columns: string[], row: TableRow): Record<string, unknown> {
  // fromEntries defines own properties, so a column named __proto__ stays a column.
  return Object.fromEntries(
    columns.map((c, i) => {
      const v = row[i];
      return [c, Buffer.isBuffer(v) ? `\\x${v.toString('hex')}` : v];
    }),
  );
}
