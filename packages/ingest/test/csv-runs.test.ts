// Runs of valid CSV rows as one record (`asCsvRun`): how runs form, what the summary counts, and
// what becomes of a run the store refuses. The store here is core's in-memory adapter; the same
// against PostgreSQL's COPY is in test/integration/ingest-csv-runs.test.ts.
import { mkdtemp, readFile, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { Readable } from 'node:stream';
import { type DeadLetter, Sink } from '@spillway/core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
// The engine's seeded generator (mulberry32): the same sequences as the copy this file had.
import { seeded as random } from '../../core/test/fakes.js';
import {
  type ColumnSpec,
  CsvLine,
  CsvRun,
  IngestError,
  ingest,
  type Reject,
  RejectFile,
  type Row,
} from '../src/index.js';
import { MemoryAdapter } from './memory-adapter.js';

let dir: string;
beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'spillway-runs-'));
});
afterAll(async () => {
  await rm(dir, { recursive: true, force: true });
});

type Record = Row | CsvLine | CsvRun;

/** Rows `id,dock,note` (every 4th note quoted over two lines); `odd` maps ids to a replacement record. */
function csv(rows: number, eol: string, odd = new Map<number, string>()): { text: string; lineOf: number[] } {
  let text = `id,dock,note${eol}`;
  const lineOf: number[] = [];
  let line = 2;
  for (let i = 1; i <= rows; i++) {
    lineOf[i] = line;
    const record = odd.get(i) ?? `${i},DK-${i % 10},${i % 4 === 0 ? `"tyre${eol}pumped"` : 'ok'}`;
    text += `${record}${eol}`;
    line += record.split('\n').length;
  }
  return { text, lineOf };
}

function linesOf(records: readonly Record[]): string[] {
  const out: string[] = [];
  for (const r of records) {
    if (r instanceof CsvRun) for (const { csv } of r.lines()) out.push(csv.bytes.toString());
    else if (r instanceof CsvLine) out.push(r.bytes.toString());
    else out.push(JSON.stringify(r));
  }
  return out;
}

/** Spellings per type: the first plain, the others not (quoted, other forms, invalid, missing). */
const SPELLINGS = {
  string: ['DK-1', 'é', '""', '"a, b"', '"two\nlines"', '"say ""hi"""', ''],
  integer: ['5', '-12', '0', '-0', '007', '+5', '"5"', 'x', '9007199254740993', ''],
  number: ['1.5', '0.1', '-3', '1.50', '1e3', '0.0000001', '"2"', 'abc', ''],
  boolean: ['true', 'false', 'TRUE', 't', '"true"', 'maybe', ''],
  timestamp: [
    '2024-05-01T10:00:00Z',
    '2024-05-01T10:00:00.123456+02:00',
    '2024-05-01',
    '2024-13-01T00:00:00Z',
    '"2024-05-01T10:00:00Z"',
    '',
  ],
} as const;

/** What an ingest handed the sink, row by row: each row's line, and its text or its object. */
async function typedIngest(text: string, runs: boolean, spec: ColumnSpec[]) {
  const adapter = new MemoryAdapter<Record>();
  const sink = new Sink(adapter);
  const rejects: Reject[] = [];
  const pieces: Buffer[] = [];
  const bytes = Buffer.from(text);
  for (let at = 0; at < bytes.length; at += 700) pieces.push(bytes.subarray(at, at + 700));
  const summary = await ingest(Readable.from(pieces), sink, {
    format: 'csv',
    columns: spec,
    rejects: { write: (r) => void rejects.push(r) },
    asCsvLine: (line) => line,
    ...(runs && { asCsvRun: (run: CsvRun) => run }),
  });
  await sink.close();
  const rows: Array<[number, string]> = [];
  adapter.stored.forEach((r, i) => {
    if (r instanceof CsvRun) for (const { line, csv } of r.lines()) rows.push([line, csv.bytes.toString()]);
    else if (r instanceof CsvLine) rows.push([adapter.lines[i]!, r.bytes.toString()]);
    else rows.push([adapter.lines[i]!, JSON.stringify(r)]);
  });
  return {
    rows,
    records: adapter.stored.length,
    rejects: rejects.map((r) => [r.line, r.reason, r.column]),
    summary,
  };
}

describe('runs of valid CSV rows', () => {
  it('hand typed columns the same rows, lines and rejects as row by row, for random spellings', async () => {
    const rnd = random(20261203);
    const pick = <T>(xs: readonly T[]): T => xs[Math.floor(rnd() * xs.length)]!;
    let fewer = 0;
    for (let d = 0; d < 40; d++) {
      const types = Array.from({ length: 1 + Math.floor(rnd() * 4) }, () =>
        pick(['string', 'integer', 'number', 'boolean', 'timestamp'] as const),
      );
      const spec: ColumnSpec[] = types.map((type, i) => ({ name: `c${i}`, type, required: rnd() < 0.3 }));
      const eol = pick(['\n', '\r\n']);
      let text = `${spec.map((c) => c.name).join(',')}${eol}`;
      for (let r = 0; r < 300; r++) {
        // Mostly the plain first spellings, so that runs form between the others.
        const fields = types.map((t) => (rnd() < 0.9 ? SPELLINGS[t][0] : pick(SPELLINGS[t])));
        text += `${fields.join(',')}${eol}`;
      }
      const byRow = await typedIngest(text, false, spec);
      const byRun = await typedIngest(text, true, spec);
      expect(byRun.rows, `document ${d}: ${JSON.stringify(text.slice(0, 200))}`).toEqual(byRow.rows);
      expect(byRun.rejects).toEqual(byRow.rejects);
      expect(byRun.summary.rowsWritten).toBe(byRow.summary.rowsWritten);
      if (byRun.records < byRow.records) fewer++;
    }
    // Runs formed in most documents.
    expect(fewer).toBeGreaterThan(30);
  });

  it('hands consecutive valid rows on as runs and counts rows, not records, in the summary', async () => {
    const { text, lineOf } = csv(5000, '\r\n', new Map([[2000, '2000,DK-0']])); // a ragged row ends a run
    const adapter = new MemoryAdapter<Record>();
    const sink = new Sink(adapter);
    const rejects: Reject[] = [];
    const summary = await ingest(Readable.from([text]), sink, {
      format: 'csv',
      rejects: { write: (r) => void rejects.push(r) },
      asCsvLine: (line) => line,
      asCsvRun: (run) => run,
    });
    await sink.close();
    const runs = adapter.stored.filter((r) => r instanceof CsvRun);
    expect(runs.length).toBeGreaterThan(0);
    expect(adapter.stored.length).toBeLessThan(5000 / 20);
    expect(summary).toMatchObject({ rowsRead: 5000, rowsWritten: 4999, rowsRejected: 1, durable: true });
    expect(rejects.map((r) => [r.line, r.reason])).toEqual([[lineOf[2000], 'column-count']]);
    // The rows, in file order, each as its line with LF for CRLF between rows (COPY takes one kind
    // of line break per statement), the CRLF inside quotes kept as data.
    const expected = text
      .split(/\r\n(?=\d+,)/)
      .slice(1)
      .map((l) => l.replace(/\r\n$/, ''))
      .filter((l) => l !== '2000,DK-0');
    expect(linesOf(adapter.stored)).toEqual(expected);
    // Each record's offset is the physical line its first row starts on.
    const first = adapter.stored.map((r) => (r instanceof CsvRun ? r.firstLine : undefined));
    expect(adapter.lines.filter((_, i) => first[i] !== undefined)).toEqual(
      first.filter((x) => x !== undefined),
    );
  });

  it('writes the rows of a run the store refused again one by one: only the bad row is dead-lettered, with its line', async () => {
    const { text, lineOf } = csv(3000, '\n', new Map([[1777, '1777,BAD,ok']]));
    const adapter = new MemoryAdapter<Record>();
    // The store refuses whatever holds the bad row: the run first, then the row alone.
    adapter.refuse = (r) => (r instanceof CsvRun || r instanceof CsvLine) && r.bytes.includes('BAD');
    const letters: DeadLetter<Record>[] = [];
    const path = join(dir, 'refused.ndjson');
    const file = new RejectFile(path);
    const target = file.deadLetterTarget<Record>((r) => (r instanceof CsvLine ? r.row() : r));
    const sink = new Sink<Record>(adapter, {
      deadLetter: {
        write: async (ls) => {
          letters.push(...ls);
          await target.write(ls);
        },
      },
    });
    const summary = await ingest(Readable.from([text]), sink, {
      format: 'csv',
      asCsvLine: (line) => line,
      asCsvRun: (run) => run,
    });
    await sink.close();
    await file.close();
    // The run went back whole, then its row alone came to the dead letters.
    expect(letters.map((l) => l.record.constructor.name)).toEqual(['CsvRun', 'CsvLine']);
    const rejected = (await readFile(path, 'utf8'))
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l));
    expect(rejected).toEqual([
      {
        line: lineOf[1777],
        column: null,
        reason: 'store',
        message: 'refused by the memory store',
        truncated: false,
        raw: JSON.stringify({ id: '1777', dock: 'BAD', note: 'ok' }),
      },
    ]);
    expect(summary).toMatchObject({ rowsRead: 3000, rowsWritten: 2999, rowsDeadLettered: 1, durable: true });
    const stored = linesOf(adapter.stored);
    expect(stored).toHaveLength(2999);
    expect(new Set(stored).size).toBe(2999);
    expect(stored.some((l) => l.includes('BAD'))).toBe(false);
  });

  it('puts every row of a run that cannot go back to its ingest in the reject file, each with its own line', async () => {
    // Lines 10–14: a record over lines 11–12, a CRLF inside quotes on 13–14.
    const bytes = Buffer.from('a,1\n"b\nb",2\n"c\r\nc",3');
    const ended = new CsvRun(bytes, 10, 3, { row: () => ({}) }, { resubmit: () => false });
    expect(ended.lines().map(({ line, csv }) => [line, csv.bytes.toString()])).toEqual([
      [10, 'a,1'],
      [11, '"b\nb",2'],
      [13, '"c\r\nc",3'],
    ]);
    let asked = 0;
    const running = new CsvRun(
      bytes,
      10,
      3,
      { row: () => ({}) },
      {
        resubmit: () => {
          asked++;
          return true;
        },
      },
    );
    const path = join(dir, 'ended.ndjson');
    const file = new RejectFile(path);
    const target = file.deadLetterTarget<CsvRun>();
    const letter = (record: CsvRun, reason: DeadLetter['reason']): DeadLetter<CsvRun> => ({
      sink: 's',
      record,
      meta: { offset: 10 },
      reason,
      error: new Error('refused'),
      time: 0,
    });
    await target.write([letter(ended, 'rejected')]);
    // Out of retries the rows are not written again: the store is not reached.
    await target.write([letter(running, 'retries-exhausted')]);
    await target.write([letter(running, 'rejected')]);
    await file.close();
    expect(asked).toBe(1);
    const rejected = (await readFile(path, 'utf8'))
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l) as { line: number; reason: string });
    expect(rejected.map((r) => [r.line, r.reason])).toEqual([
      [10, 'store'],
      [11, 'store'],
      [13, 'store'],
      [10, 'store'],
      [11, 'store'],
      [13, 'store'],
    ]);
  });
  it('puts the rows of a refused run in the reject target, each with its line, when the sink fails before they are written again', async () => {
    const { text, lineOf } = csv(2000, '\n', new Map([[1500, '1500,BAD,ok']]));
    const adapter = new MemoryAdapter<Record>();
    adapter.refuse = (r) => r instanceof CsvRun && r.bytes.includes('BAD');
    const path = join(dir, 'stopped.ndjson');
    const file = new RejectFile(path);
    const target = file.deadLetterTarget<Record>();
    let handedBack = 0;
    const sink = new Sink<Record>(adapter, {
      deadLetter: {
        // The run goes back to the ingest, then the dead-letter store fails: so does the sink.
        write: async (letters) => {
          await target.write(letters);
          handedBack += letters.length;
          throw new Error('the dead-letter store is gone');
        },
      },
    });
    const error = await ingest(Readable.from([text]), sink, {
      format: 'csv',
      rejects: file,
      asCsvLine: (line) => line,
      asCsvRun: (run) => run,
    }).catch((e: unknown) => e);
    await sink.close().catch(() => undefined);
    await file.close();
    expect(handedBack).toBe(1);
    expect(error).toBeInstanceOf(IngestError);
    const summary = (error as IngestError).summary;
    const rejected = (await readFile(path, 'utf8'))
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l) as { line: number; reason: string; raw: string });
    // Every row of the refused run is in the reject file with its own line, the bad one too.
    expect(rejected.length).toBeGreaterThan(1);
    expect(rejected.every((r) => r.reason === 'store')).toBe(true);
    expect(rejected.map((r) => r.line)).toContain(lineOf[1500]);
    for (const r of rejected) expect(lineOf.indexOf(r.line)).toBe(Number(r.raw.split(',')[0]));
    // And every row of the file is accounted for: written, refused, or pending in the failed sink.
    expect(summary.rowsRead).toBe(2000);
    expect(summary.rowsDeadLettered).toBe(rejected.length);
    expect(summary.rowsWritten + summary.rowsDeadLettered + summary.rowsPending).toBe(2000);
    expect(linesOf(adapter.stored)).toHaveLength(summary.rowsWritten);
  });
});
