// NDJSON rows as COPY lines (`asCsvLine`, `asCsvRun` with declared columns): the sink must get
// exactly the rows, lines and rejects that reading row by row gives, only packed differently.
// Against PostgreSQL: test/integration/ingest-ndjson-runs.test.ts.
import { Readable } from 'node:stream';
import { Sink } from '@spillway/core';
import { describe, expect, it } from 'vitest';
import { type ColumnSpec, CsvLine, CsvRun, ingest, type Reject, type Row } from '../src/index.js';
import { MemoryAdapter } from './memory-adapter.js';

type Record = Row | CsvLine | CsvRun;

const COLUMNS: ColumnSpec[] = [
  { name: 'id', type: 'integer', required: true },
  { name: 'dock', required: true },
  { name: 'km', type: 'number' },
  { name: 'ok', type: 'boolean' },
  { name: 'at', type: 'timestamp' },
  { name: 'note' },
];

/** Tandem Bikes service records, with blank lines, bad rows and awkward text among them. */
function ndjson(rows: number): string {
  const notes = ['ok', 'brakes\nchecked', '"worn, replaced"', '\\.', 'café 🚲 東', null, 'a\r\nb'];
  let text = '';
  for (let i = 1; i <= rows; i++) {
    if (i % 97 === 0) text += '{"id": "x"}\n'; // a type reject
    if (i % 89 === 0) text += '[1, 2]\n'; // not an object
    if (i % 83 === 0) text += '{"id": 1,\n'; // not JSON
    if (i % 31 === 0) text += '\n';
    const row = {
      id: i,
      dock: `DK-${i % 10}`,
      km: i % 3 === 0 ? null : (i % 500) / 10,
      ok: i % 2 === 0,
      at: `2024-05-01T10:00:00.${String(i).padStart(6, '0')}Z`,
      // An empty string is a value, which a row object carries (it ends a run): now and then.
      note: i % 101 === 0 ? '' : notes[i % notes.length],
    };
    text += `${JSON.stringify(row)}${i % 5 === 0 ? '\r\n' : '\n'}`;
  }
  return text;
}

async function read(text: string, asLines: boolean) {
  const adapter = new MemoryAdapter<Record>();
  const sink = new Sink(adapter);
  const rejects: Reject[] = [];
  const bytes = Buffer.from(text);
  const chunks: Buffer[] = [];
  for (let i = 0; i < bytes.length; i += 4093) chunks.push(bytes.subarray(i, i + 4093));
  let runs = 0;
  const summary = await ingest(Readable.from(chunks), sink, {
    format: 'ndjson',
    columns: COLUMNS,
    rejects: { write: (r) => void rejects.push(r) },
    ...(asLines && {
      asCsvLine: (line: CsvLine) => line,
      asCsvRun: (run: CsvRun) => {
        runs++;
        return run;
      },
    }),
  });
  await sink.close();
  // Each row with its line, whatever record carried it.
  const rows: Array<[number, Row]> = [];
  adapter.stored.forEach((r, i) => {
    if (r instanceof CsvRun) for (const { line, csv } of r.lines()) rows.push([line, csv.row()]);
    else if (r instanceof CsvLine) rows.push([adapter.lines[i]!, r.row()]);
    else rows.push([adapter.lines[i]!, r]);
  });
  const { durationMs: _d, rowsPerSecond: _r, ...counts } = summary;
  return {
    rows,
    runs,
    rejects: rejects.map((r) => [r.line, r.reason, r.column]),
    counts,
  };
}

describe('NDJSON rows as COPY lines', () => {
  it('hands on exactly the rows, lines and rejects that row objects give', async () => {
    const text = ndjson(2000);
    const plain = await read(text, false);
    const lines = await read(text, true);
    expect(lines.runs).toBeGreaterThan(0);
    // Runs end at every reject and every input chunk (4,093 bytes here): still far fewer than rows.
    expect(lines.runs).toBeLessThan(2000 / 10);
    expect(plain.rejects.length).toBeGreaterThan(60);
    expect(lines.rows).toEqual(plain.rows);
    expect(lines.rejects).toEqual(plain.rejects);
    expect(lines.counts).toEqual(plain.counts);
  });

  it('writes each value as COPY (FORMAT csv) reads it back: strings quoted, NULL empty', async () => {
    const adapter = new MemoryAdapter<Record>();
    const sink = new Sink(adapter);
    await ingest(
      Readable.from([
        '{"id":1,"dock":"DK-1","km":2.5,"ok":true,"at":"2024-05-01T10:00:00Z","note":"say \\"hi\\", then\\nleave"}\n',
      ]),
      sink,
      { format: 'ndjson', columns: COLUMNS, asCsvLine: (line: CsvLine) => line },
    );
    await sink.close();
    const line = adapter.stored[0] as CsvLine;
    expect(line).toBeInstanceOf(CsvLine);
    // PostgreSQL documentation, COPY, "CSV Format": quotes doubled inside a quoted value.
    expect(line.bytes.toString()).toBe('1,"DK-1",2.5,true,"2024-05-01T10:00:00Z","say ""hi"", then\nleave"');
  });

  it('keeps a row whose column is json as a row object', async () => {
    const adapter = new MemoryAdapter<Record>();
    const sink = new Sink(adapter);
    await ingest(Readable.from(['{"id":1,"parts":{"chain":2}}\n']), sink, {
      format: 'ndjson',
      columns: [
        { name: 'id', type: 'integer' },
        { name: 'parts', type: 'json' },
      ],
      asCsvLine: (line: CsvLine) => line,
    });
    await sink.close();
    expect(adapter.stored).toEqual([{ id: 1, parts: { chain: 2 } }]);
  });
});
