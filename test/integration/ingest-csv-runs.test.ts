// Runs of valid CSV rows handed to a PostgreSQL COPY as one record (`asCsvRun`): a COPY that fails
// inside a run must cost only the row at fault. The run goes back to the ingest through the reject
// file's dead-letter target, its rows are written again one per record, and the adapter's
// isolation finds the bad one. Checked on what the table holds and what the reject file says.
import { readFile, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { Readable } from 'node:stream';
import { Sink } from '@spillway/core';
import { CsvLine, CsvRun, ingest, RejectFile, type Row } from '@spillway/ingest';
import { postgresAdapter } from '@spillway/postgres';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { type TestSchema, uniqueName, withSchema } from '../harness/index.js';

let db: TestSchema;
beforeAll(async () => {
  db = await withSchema('ingest_runs');
});
afterAll(async () => {
  await db?.drop();
});

type Record = Row | CsvLine | CsvRun;

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

async function load(csv: Buffer, chunk: number, multiLine: string) {
  const table = uniqueName('runs');
  await db.pool.query(
    `CREATE TABLE ${table} (id int PRIMARY KEY, dock text NOT NULL, km int NOT NULL CHECK (km < 1000), note text)`,
  );
  const path = join(tmpdir(), `${uniqueName('runs')}.rejects.ndjson`);
  const rejects = new RejectFile(path);
  const columns = ['id', 'dock', 'km', 'note'];
  let runs = 0;
  let runRows = 0;
  const sink = new Sink<Record>(
    postgresAdapter<Record>({
      pool: db.pool,
      table,
      columns,
      map: (r) => {
        const row = r instanceof CsvLine ? r.row() : (r as Row);
        return columns.map((c) => row[c]);
      },
      mode: 'copy',
      csvLine: (r) => (r instanceof CsvLine || r instanceof CsvRun ? r.bytes : undefined),
    }),
    {
      // Several runs per batch, so a refused batch is first split down to the run at fault.
      maxRecords: 8,
      retry: { maxAttempts: 2, baseDelayMs: 1 },
      deadLetter: rejects.deadLetterTarget<Record>((r) => (r instanceof CsvLine ? r.row() : r)),
    },
  );
  const pieces: Buffer[] = [];
  for (let at = 0; at < csv.length; at += chunk) pieces.push(csv.subarray(at, at + chunk));
  const summary = await ingest(Readable.from(pieces), sink, {
    format: 'csv',
    rejects,
    asCsvLine: (line: CsvLine) => line,
    asCsvRun: (run: CsvRun) => {
      runs++;
      runRows += run.count;
      return run;
    },
  });
  await sink.close();
  await rejects.close();
  const text = await readFile(path, 'utf8');
  await rm(path, { force: true });
  const rejected = text
    .split('\n')
    .filter(Boolean)
    .map((l) => JSON.parse(l) as { line: number; reason: string; message: string });
  const { rows } = await db.pool.query(
    `SELECT count(*)::int AS n, count(DISTINCT id)::int AS ids, coalesce(sum(id), 0)::bigint AS sum,
       count(*) FILTER (WHERE note = $1)::int AS multi FROM ${table}`,
    [multiLine],
  );
  return {
    summary,
    rejected,
    runs,
    runRows,
    table: rows[0] as { n: number; ids: number; sum: string; multi: number },
  };
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
