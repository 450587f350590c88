// Runs of valid CSV rows handed to a PostgreSQL COPY as one record (`asCsvRun`): a COPY that fails
// inside a run must cost only the row at fault. The run goes back to the ingest through the reject
// file's dead-letter target, its rows are written again one per record, and the adapter's
// isolation finds the bad one. Checked on what the table holds and what the reject file says.
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { type TestSchema, withSchema } from '../harness/index.js';
import { loadAsRuns } from './ingest-runs.js';

let db: TestSchema;
beforeAll(async () => {
  db = await withSchema('ingest_runs');
});
afterAll(async () => {
  await db?.drop();
});

interface Upload {
  csv: Buffer;
  /** Physical line of each row, by id. */
  lineOf: Map<number, number>;
}

/**
 * Tandem Bikes service records `id,dock,km,note`: every 7th note is quoted with a line break
 * inside (one record, two physical lines), every 5th with a comma. `bad` maps ids to a km value
 * the table refuses.
 */
function upload(
  rows: number,
  eol: string,
  bad: Map<number, string>,
  duplicateOf = new Map<number, number>(),
) {
  const parts = [`id,dock,km,note${eol}`];
  const lineOf = new Map<number, number>();
  let line = 2;
  for (let i = 1; i <= rows; i++) {
    const note = i % 7 === 0 ? `"brakes${eol}checked"` : i % 5 === 0 ? '"chain, oiled"' : 'ok';
    const id = duplicateOf.get(i) ?? i;
    lineOf.set(i, line);
    parts.push(`${id},DK-${String(i % 100).padStart(4, '0')},${bad.get(i) ?? String(i % 90)},${note}${eol}`);
    line += i % 7 === 0 ? 2 : 1;
  }
  return { csv: Buffer.from(parts.join('')), lineOf } satisfies Upload;
}

/** The upload loaded as runs, and what the table holds: rows, distinct ids, their sum, multi-line notes. */
async function load(csv: Buffer, chunk: number, multiLine: string) {
  const out = await loadAsRuns(db, csv, chunk, { format: 'csv' });
  const { rows } = await db.pool.query(
    `SELECT count(*)::int AS n, count(DISTINCT id)::int AS ids, coalesce(sum(id), 0)::bigint AS sum,
       count(*) FILTER (WHERE note = $1)::int AS multi FROM ${out.table}`,
    [multiLine],
  );
  return { ...out, table: rows[0] as { n: number; ids: number; sum: string; multi: number } };
}

const sum = (ids: Iterable<number>) => [...ids].reduce((a, b) => a + b, 0);

describe('runs of valid CSV rows in one COPY', () => {
  for (const [name, eol] of [
    ['LF', '\n'],
    ['CRLF', '\r\n'],
  ] as const) {
    it(`rejects only the row a COPY refuses inside a run, with its line and SQLSTATE, and lands every other row once (${name})`, async () => {
      const n = 3000;
      // A text where an integer belongs (22P02), a check violated (23514), and a duplicate id of a
      // row in an earlier run (23505), each in the middle of a run.
      const bad = new Map([
        [1234, 'many'],
        [2100, '5000'],
      ]);
      const { csv, lineOf } = upload(n, eol, bad, new Map([[2500, 17]]));
      const out = await load(csv, 6_007, `brakes${eol}checked`);

      // The runs did form: far fewer records than rows.
      expect(out.runs).toBeGreaterThan(0);
      expect(out.runRows).toBeGreaterThan(n / 2);
      expect(out.runs).toBeLessThan(out.runRows / 20);

      const refused = [1234, 2100, 2500];
      expect(out.rejected.map((r) => [r.line, r.reason])).toEqual(
        refused.map((i) => [lineOf.get(i), 'store']),
      );
      expect(out.rejected[0]!.message).toContain('SQLSTATE 22P02');
      expect(out.rejected[1]!.message).toContain('SQLSTATE 23514');
      expect(out.rejected[2]!.message).toContain('SQLSTATE 23505');

      // Every other row landed once: the ids of rows 1..n but the refused ones.
      const landed = new Set(Array.from({ length: n }, (_, k) => k + 1).filter((i) => !refused.includes(i)));
      expect(out.table.n).toBe(n - 3);
      expect(out.table.ids).toBe(n - 3);
      expect(Number(out.table.sum)).toBe(sum(landed));
      // A line break inside quotes is data, kept as sent (the CR of a CRLF too); row 2100 has one.
      expect(out.table.multi).toBe(Math.floor(n / 7) - 1);

      expect(out.summary).toMatchObject({
        rowsRead: n,
        rowsWritten: n - 3,
        rowsRejected: 0,
        rowsDeadLettered: 3,
        rowsPending: 0,
        durable: true,
      });
    });
  }
});
