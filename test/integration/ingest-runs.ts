// What the CSV and NDJSON run tests share: an upload ingested into a fresh PostgreSQL table in
// copy mode with `asCsvLine` / `asCsvRun`, the reject file as dead-letter target (so a run the
// COPY refuses comes back and is written again one row per record), and what that left behind.
import { readFile, rm } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { Readable } from 'node:stream';
import { Sink } from '@spillway/core';
import {
  CsvLine,
  CsvRun,
  type IngestOptions,
  type IngestSummary,
  ingest,
  RejectFile,
  type Row,
} from '@spillway/ingest';
import { postgresAdapter } from '@spillway/postgres';
import { type TestSchema, uniqueName } from '../harness/index.js';

type RunRecord = Row | CsvLine | CsvRun;

/** The service records' table: `km` refuses non-integers (22P02) and values of 1000 or more (23514). */
const COLUMNS = ['id', 'dock', 'km', 'note'];

export interface RunsLoaded {
  summary: IngestSummary;
  /** The reject file's entries, in order. */
  rejected: Array<{ line: number; reason: string; message: string }>;
  /** How many runs the ingest handed on, and how many rows they held. */
  runs: number;
  runRows: number;
  /** The table the rows landed in (in the test's schema). */
  table: string;
}

/** Ingests `input`, handed on in pieces of `chunk` bytes, into a new table `(id, dock, km, note)`. */
export async function loadAsRuns(
  db: TestSchema,
  input: Buffer,
  chunk: number,
  options: Pick<IngestOptions<RunRecord>, 'format' | 'columns'>,
): Promise<RunsLoaded> {
  const table = uniqueName('runs');
  await db.pool.query(
    `CREATE TABLE ${table} (id int PRIMARY KEY, dock text NOT NULL, km int NOT NULL CHECK (km < 1000), note text)`,
  );
  const path = join(tmpdir(), `${uniqueName('runs')}.rejects.ndjson`);
  const rejects = new RejectFile(path);
  let runs = 0;
  let runRows = 0;
  const sink = new Sink<RunRecord>(
    postgresAdapter<RunRecord>({
      pool: db.pool,
      table,
      columns: COLUMNS,
      map: (r) => {
        const row = r instanceof CsvLine ? r.row() : (r as Row);
        return COLUMNS.map((c) => row[c]);
      },
      mode: 'copy',
      csvLine: (r) => (r instanceof CsvLine || r instanceof CsvRun ? r.bytes : undefined),
    }),
    {
      // Several runs per batch, so a refused batch is first split down to the run at fault.
      maxRecords: 8,
      retry: { maxAttempts: 2, baseDelayMs: 1 },
      deadLetter: rejects.deadLetterTarget<RunRecord>((r) => (r instanceof CsvLine ? r.row() : r)),
    },
  );
  const pieces: Buffer[] = [];
  for (let at = 0; at < input.length; at += chunk) pieces.push(input.subarray(at, at + chunk));
  const summary = await ingest(Readable.from(pieces), sink, {
    ...options,
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
  return { summary, rejected, runs, runRows, table };
}
