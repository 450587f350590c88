// NDJSON rows built from declared columns go to a PostgreSQL COPY as CSV lines, consecutive rows
// as one run (`asCsvLine` / `asCsvRun`, packages/ingest/src/json-run.ts). A COPY that fails inside
// a run must cost only the row at fault, reported with its own physical line of the NDJSON file;
// and what lands must be what was sent, whatever the text holds (quotes, commas, line breaks,
// `\.`, which COPY (FORMAT csv) reads specially: PostgreSQL documentation, COPY, "CSV Format").
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { type TestSchema, withSchema } from '../harness/index.js';
import { loadAsRuns } from './ingest-runs.js';

let db: TestSchema;
beforeAll(async () => {
  db = await withSchema('ingest_json_runs');
});
afterAll(async () => {
  await db?.drop();
});

/** Notes of Tandem Bikes service records, each a case COPY reads specially, or none. */
const NOTES: Array<string | null> = [
  'ok',
  'brakes\nchecked',
  '"worn, replaced" front',
  '\\.',
  'café stop: saddle\r\n',
  '🚲 dock 東 5',
  null,
];
/** A row's note; an empty string (a value, which goes as a row object and ends a run) now and then. */
const noteOf = (i: number) => (i % 97 === 0 ? '' : NOTES[i % NOTES.length]!);

/**
 * `rows` service records `{id, dock, km, note}` as NDJSON, a blank line after every 50th row, so
 * that lines and rows differ. `bad` maps ids to a km text the table refuses; `duplicateOf` gives a
 * row the id of another.
 */
function upload(rows: number, bad: Map<number, string>, duplicateOf: Map<number, number>) {
  const parts: string[] = [];
  const lineOf = new Map<number, number>();
  let line = 1;
  for (let i = 1; i <= rows; i++) {
    lineOf.set(i, line);
    const row = {
      id: duplicateOf.get(i) ?? i,
      dock: `DK-${String(i % 100).padStart(4, '0')}`,
      km: bad.get(i) ?? String(i % 90),
      note: noteOf(i),
    };
    parts.push(`${JSON.stringify(row)}\n`);
    line++;
    if (i % 50 === 0) {
      parts.push('\n');
      line++;
    }
  }
  return { ndjson: Buffer.from(parts.join('')), lineOf };
}

/** The upload loaded as runs (every column declared), and the rows the table holds. */
async function load(ndjson: Buffer, chunk: number) {
  const out = await loadAsRuns(db, ndjson, chunk, {
    format: 'ndjson',
    columns: [
      { name: 'id', type: 'integer', required: true },
      { name: 'dock', required: true },
      { name: 'km' },
      { name: 'note' },
    ],
  });
  const { rows } = await db.pool.query(`SELECT id, dock, km, note FROM ${out.table} ORDER BY id`);
  return { ...out, rows: rows as Array<{ id: number; note: string | null }> };
}

const sum = (ids: Iterable<number>) => [...ids].reduce((a, b) => a + b, 0);

describe('runs of valid NDJSON rows in one COPY', () => {
  it('rejects only the row a COPY refuses inside a run, with its own NDJSON line and SQLSTATE, and lands every other row once', async () => {
    const n = 3000;
    // A text where an integer belongs (22P02), a check violated (23514), and a duplicate id of a
    // row in an earlier run (23505), each in the middle of a run.
    const bad = new Map([
      [1234, 'many'],
      [2100, '5000'],
    ]);
    const { ndjson, lineOf } = upload(n, bad, new Map([[2500, 17]]));
    const out = await load(ndjson, 6_007);

    // The runs did form: far fewer records than rows.
    expect(out.runRows).toBeGreaterThan(n / 2);
    expect(out.runs).toBeLessThan(out.runRows / 20);

    const refused = [1234, 2100, 2500];
    expect(out.rejected.map((r) => [r.line, r.reason])).toEqual(refused.map((i) => [lineOf.get(i), 'store']));
    // Lines, not rows: a blank line follows every 50th row.
    expect(lineOf.get(2500)).toBe(2500 + 49);
    expect(out.rejected[0]!.message).toContain('SQLSTATE 22P02');
    expect(out.rejected[1]!.message).toContain('SQLSTATE 23514');
    expect(out.rejected[2]!.message).toContain('SQLSTATE 23505');

    const landed = Array.from({ length: n }, (_, k) => k + 1).filter((i) => !refused.includes(i));
    expect(out.rows.length).toBe(n - 3);
    expect(sum(out.rows.map((r) => r.id))).toBe(sum(landed));
    // Each note landed as sent: quotes, commas, line breaks, `\.`, a CRLF, an empty string, null.
    for (const r of out.rows) expect(r.note).toBe(noteOf(r.id));

    expect(out.summary).toMatchObject({
      rowsRead: n,
      rowsWritten: n - 3,
      rowsRejected: 0,
      rowsDeadLettered: 3,
      rowsPending: 0,
      blankLines: Math.floor(n / 50),
      durable: true,
    });
  });
});
