// Tandem Bikes: pick the batch settings of the dock-status sink from measurements on our own
// table, with our own records, not from a guess. The operations team wants every dock status
// durable within 250 ms (p99) at rush hour, about 2,000 reports/s, written with COPY.
//
// The tuner copies the table's definition into a scratch schema (indexes, constraints, defaults),
// writes the sample there at that rate for each setting it tries, recommends the setting that
// meets the target with 25 % headroom at the least store time per record, runs it once more to
// check, and drops the copy. Our table is only read from the catalogs.
//
//   npm run build && DATABASE_URL=postgres://postgres@127.0.0.1:5432/test node --import tsx examples/tune-a-sink.ts
//
// The same from the command line (on a table of yours):
//   spillway tune --to postgres://… --table tandem.dock_status --mode copy \
//     --sample examples/data/dock-status.ndjson --rate 2000 --p99 250
import { mkdir, writeFile } from 'node:fs/promises';
import { formatTableTune, tableChart, tuneTable } from '@spillway/tuner';
import pg from 'pg';

const url = process.env.DATABASE_URL ?? 'postgres://postgres@127.0.0.1:5432/test';
const sample = new URL('./data/dock-status.ndjson', import.meta.url).pathname;

// The example's own copy of the Tandem Bikes status table, so that it runs on an empty database;
// point `table` at yours instead and leave this out.
const admin = new pg.Client({ connectionString: url });
await admin.connect();
await admin.query(`
  CREATE SCHEMA IF NOT EXISTS tandem_example;
  CREATE TABLE IF NOT EXISTS tandem_example.stations (station_id text PRIMARY KEY, district integer NOT NULL);
  CREATE TABLE IF NOT EXISTS tandem_example.dock_status (
    id bigserial PRIMARY KEY,
    dock_id integer NOT NULL,
    station_id text NOT NULL REFERENCES tandem_example.stations,
    bikes_available integer NOT NULL CHECK (bikes_available >= 0),
    docks_free integer NOT NULL CHECK (docks_free >= 0),
    status text NOT NULL,
    reported_at timestamptz NOT NULL);
  CREATE INDEX IF NOT EXISTS dock_status_by_dock ON tandem_example.dock_status (dock_id, reported_at DESC);
  CREATE INDEX IF NOT EXISTS dock_status_by_station ON tandem_example.dock_status (station_id, status);`);

try {
  const outcome = await tuneTable({
    url,
    table: 'tandem_example.dock_status',
    mode: 'copy',
    sample,
    rate: 2000,
    p99Ms: 250,
    budgetMs: 40_000,
    validateMs: 10_000,
    onProgress: (e) => {
      if (e.kind === 'trial')
        process.stderr.write(
          `  trial ${e.done}/${e.total}: p99 ${e.trial.p99Ms} ms, ${(e.trial.storeMsPerRecord * 1000).toFixed(1)} µs/record\n`,
        );
      else if (e.kind === 'plan')
        process.stderr.write(`Plan: ${e.trials} trials, about ${Math.ceil(e.estimateMs / 1000)} s\n`);
      else if (e.kind === 'note') process.stderr.write(`${e.text}\n`);
    },
  });
  console.log(formatTableTune(outcome));
  await mkdir('spillway-tune', { recursive: true });
  await writeFile('spillway-tune/tandem_example.dock_status.svg', tableChart(outcome));
  if (!outcome.recommended || outcome.validation?.holds === false) process.exitCode = 3;
} finally {
  await admin.query('DROP SCHEMA tandem_example CASCADE');
  await admin.end();
}
