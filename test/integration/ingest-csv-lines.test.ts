// Valid CSV rows handed to a PostgreSQL COPY as their own text (`asCsvLine` + the adapter's
// `csvLine`) land exactly what the same upload lands as row objects: the same table contents
// (NULL and empty strings told apart), the same rejects with the same lines, the same dead letters.
// The reference is the row-object path, checked by the server itself: what COPY (FORMAT csv) makes
// of a line follows PostgreSQL documentation, COPY, "CSV Format".
import { Readable } from 'node:stream';
import { type DeadLetter, Sink } from '@spillway/core';
import { type ColumnSpec, CsvLine, ingest, type Reject, type Row } from '@spillway/ingest';
import { postgresAdapter } from '@spillway/postgres';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { type TestSchema, withSchema } from '../harness/index.js';

let db: TestSchema;
beforeAll(async () => {
  db = await withSchema('ingest_lines');
});
afterAll(async () => {
  await db?.drop();
});

type Record = Row | CsvLine;
const rowOf = (r: Record): Row => (r instanceof CsvLine ? r.row() : r);

interface Outcome {
  table: string;
  rejects: Array<[number, string, string | undefined]>;
  deadLetters: Array<[number, Row]>;
  written: number;
  lines: number;
}

/** Ingests `csv` into a fresh table, with or without CSV lines, and reads back what landed. */
async function load(
  ddl: string,
  columns: string[],
  csv: Buffer,
  lines: boolean,
  spec?: ColumnSpec[],
): Promise<Outcome> {
  const table = `t_${Math.random().toString(36).slice(2, 10)}`;
  await db.pool.query(`CREATE TABLE ${table} (${ddl})`);
  const deadLetters: Array<[number, Row]> = [];
  const sink = new Sink<Record>(
    postgresAdapter<Record>({
      pool: db.pool,
      table,
      columns,
      map: (r) => {
        const row = rowOf(r);
        return columns.map((c) => row[c]);
      },
      mode: 'copy',
      ...(lines && { csvLine: (r: Record) => (r instanceof CsvLine ? r.bytes : undefined) }),
    }),
    {
      // Small batches: lines and row objects share batches, and a bad row is isolated quickly.
      maxRecords: 4,
      retry: { maxAttempts: 2, baseDelayMs: 1 },
      deadLetter: {
        write: async (letters: readonly DeadLetter<Record>[]) => {
          for (const l of letters) deadLetters.push([Number(l.meta?.offset), rowOf(l.record)]);
        },
      },
    },
  );
  const rejects: Reject[] = [];
  let sentAsLines = 0;
  const summary = await ingest(Readable.from([csv.subarray(0, 7), csv.subarray(7)]), sink, {
    format: 'csv',
    ...(spec && { columns: spec }),
    rejects: { write: async (r) => void rejects.push(r) },
    ...(lines && {
      asCsvLine: (line: CsvLine) => {
        sentAsLines++;
        return line;
      },
    }),
  });
  await sink.close();
  // A row's text form tells NULL (nothing) from an empty string ("").
  const { rows } = await db.pool.query(
    `SELECT coalesce(string_agg(t::text, E'\\n' ORDER BY t::text), '') AS all FROM ${table} t`,
  );
  deadLetters.sort((a, b) => a[0] - b[0]);
  return {
    table: rows[0].all as string,
    rejects: rejects.map((r) => [r.line, r.reason, r.column]),
    deadLetters,
    written: summary.rowsWritten,
    lines: sentAsLines,
  };
}

describe('CSV rows handed to COPY as their own text', () => {
  it('land text columns exactly as row objects do: empty fields, quotes, line breaks, CRs and rejects', async () => {
    const csv = Buffer.concat([
      Buffer.from('\xef\xbb\xbf', 'latin1'),
      Buffer.from(
        [
          'a,b,c\r\n',
          'r01,plain,x\r\n',
          'r02,,x\n', // an unquoted empty field: an empty string, not NULL
          'r03,x,\r\n',
          ',r04,y\n',
          'r05,"",x\n', // quoted empty
          'r06,"with, comma","doubled ""quote"""\n',
          'r07,"multi\r\nline","lf\nonly"\r\n',
          'r08,lone\rcr,x\n', // a CR outside quotes is data here, a line end to COPY
          'r09,café ünïcødé,✓\n',
          'r10,"cr at the end\r",x\n',
          '\r\n', // blank
          'r11,x\n', // ragged
          'r12,a "b",c\n', // csv-syntax
          'r13,\\.,\\N\n', // backslashes mean nothing in CSV
          ' r14 , spaced ,x\n',
          'r15,nul\0here,x\n', // the server refuses a NUL: dead-lettered on both paths
          'r16,"""",",,,"\n',
          'r17,,\n',
        ].join(''),
      ),
      Buffer.from('r18,caf\xe9,x\n', 'latin1'), // not UTF-8
      Buffer.from('r19,last,"no line break"'),
    ]);
    const ddl = 'a text, b text, c text';
    const rows = await load(ddl, ['a', 'b', 'c'], csv, false);
    const lines = await load(ddl, ['a', 'b', 'c'], csv, true);
    expect(lines.table).toBe(rows.table);
    expect(lines.rejects).toEqual(rows.rejects);
    expect(lines.deadLetters).toEqual(rows.deadLetters);
    expect(lines.written).toBe(rows.written);
    // What the server holds, spelled out for the rows that differ between NULL and "".
    expect(rows.table).toContain('(r02,"",x)');
    expect(rows.table).toContain('(r17,"","")');
    expect(rows.table).toContain('("",r04,y)');
    // Physical lines: the header is 1, r07 spans 8–10, the blank line is 14.
    expect(rows.rejects).toEqual([
      [15, 'column-count', undefined],
      [16, 'csv-syntax', 'b'],
      [22, 'utf8', 'b'],
    ]);
    expect(rows.deadLetters).toEqual([[19, { a: 'r15', b: 'nul\0here', c: 'x' }]]);
    expect(rows.written).toBe(15);
    // Every valid row but r08 (a CR outside quotes) went as its text; r15 too: the server
    // refuses it, and its line is dead-lettered as the row it stands for.
    expect(lines.lines).toBe(15);
  });

  it('lands a lone \\. as a value, which COPY would read as the end of the data', async () => {
    const csv = Buffer.from('v\nfirst\n\\.\n"\\."\nlast\n');
    const rows = await load('v text', ['v'], csv, false);
    const lines = await load('v text', ['v'], csv, true);
    expect(rows.written).toBe(4);
    expect(rows.table.split('\n')).toHaveLength(4);
    expect(lines.table).toBe(rows.table);
    expect(lines.written).toBe(4);
    expect(lines.lines).toBe(3);
  });

  it('land typed columns exactly as row objects do, sending as text only values spelled as they are written', async () => {
    const spec: ColumnSpec[] = [
      { name: 'id', required: true },
      { name: 'n', type: 'integer' },
      { name: 'x', type: 'number', min: 0 },
      { name: 'ok', type: 'boolean' },
      { name: 'at', type: 'timestamp' },
      { name: 'doc', type: 'json' },
      { name: 'note' },
    ];
    const csv = Buffer.from(
      [
        'id,n,x,ok,at,doc,note',
        'r01,5,1.5,true,2024-05-01T10:00:00.123456Z,,plain', // all spelled as written: a line
        'r02,,,,,,', // every optional value missing: NULL, a line
        'r03,"",x,,,,', // a quoted empty number is missing too; "x" is not a number: rejected
        'r04,+5,1.50,yes,2024-05-01,,', // spelled otherwise: sent as a row object
        'r05,007,1e3,TRUE,2024-05-01 10:00:00+02:00,,"a, b"',
        'r06,1,2,false,,"{""k"": [1, 2]}",x', // json is written again: a row object
        'r07,1,-1,,,,', // below the minimum: rejected
        ',1,1,,,,', // required id missing: rejected
        'r09,"",,,,,"quoted ""empty"" number before"', // "" in a quoted row: a row object
        'r10,9007199254740993,,,,,', // beyond 2^53: rejected
        'r11,12,0.1,false,2024-12-31T23:59:60Z,,\\.',
      ].join('\n'),
    );
    const ddl = 'id text, n bigint, x double precision, ok boolean, at timestamptz, doc jsonb, note text';
    const names = spec.map((c) => c.name);
    const rows = await load(ddl, names, csv, false, spec);
    const lines = await load(ddl, names, csv, true, spec);
    expect(lines.table).toBe(rows.table);
    expect(lines.rejects).toEqual(rows.rejects);
    expect(lines.written).toBe(rows.written);
    expect(rows.rejects).toEqual([
      [4, 'type', 'x'],
      [8, 'range', 'x'],
      [9, 'required', 'id'],
      [11, 'range', 'n'],
    ]);
    expect(rows.written).toBe(7);
    // r01, r02 and r11 went as their text; r04, r05, r06 and r09 as row objects.
    expect(lines.lines).toBe(3);
  });
});
