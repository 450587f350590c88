// Measures the peak RSS and throughput of ingesting a large generated CSV of Tandem Bikes service
// records into a sink, against a baseline run in the same invocation that only reads the file.
// Each run is its own child process so one run's heap does not colour the next. Nothing here
// asserts a time; it prints figures.
//
//   node --import tsx benchmarks/src/ingest-memory.ts                 # 1 GiB, null store
//   INGEST_BYTES=268435456 INGEST_RUNS=3 node --import tsx benchmarks/src/ingest-memory.ts
//   INGEST_STORE=postgres SPILLWAY_PG_URL=postgres://127.0.0.1:5432/test node --import tsx benchmarks/src/ingest-memory.ts
import { spawn } from 'node:child_process';
import { createReadStream } from 'node:fs';
import { stat } from 'node:fs/promises';
import { cpus, tmpdir, totalmem } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { Sink, type SinkAdapter } from '@spillway/core';
import { type ColumnSpec, ingestFile, type Row } from '@spillway/ingest';
import { writeServiceRecords } from './service-records.js';

const COLUMNS: ColumnSpec[] = [
  { name: 'record_id', type: 'string', required: true, pattern: '^SR-\\d+$' },
  { name: 'dock_id', type: 'string', required: true },
  { name: 'bike_id', type: 'integer', required: true, min: 1 },
  { name: 'serviced_at', type: 'timestamp', required: true },
  { name: 'odometer_km', type: 'number', min: 0 },
  { name: 'passed', type: 'boolean' },
  { name: 'kind', enum: ['brakes', 'chain', 'tyre', 'battery', 'lights'] },
  { name: 'note' },
];
/** A store that acknowledges at once: the figures are the ingest's own. */
const nullAdapter: SinkAdapter<Row> = { kind: 'null', async write() {}, classify: () => 'fatal' };

async function child(mode: string, path: string): Promise<void> {
  let peak = process.memoryUsage().rss;
  const timer = setInterval(() => {
    peak = Math.max(peak, process.memoryUsage().rss);
  }, 50);
  const t0 = performance.now();
  let rows = 0;
  let bytes = 0;
  if (mode === 'read') {
    // Baseline: the same file through the same stream settings, no parsing.
    for await (const chunk of createReadStream(path, { highWaterMark: 256 * 1024 })) {
      bytes += (chunk as Buffer).length;
      for (let i = (chunk as Buffer).indexOf(10); i >= 0; i = (chunk as Buffer).indexOf(10, i + 1)) rows++;
    }
  } else {
    let sink: Sink<Row>;
    let done = async () => {};
    if (mode === 'postgres') {
      const pg = (await import('pg')).default;
      const { postgresSink } = await import('@spillway/postgres');
      const pool = new pg.Pool({
        connectionString: process.env.SPILLWAY_PG_URL ?? 'postgres://127.0.0.1:5432/test',
        max: 2,
      });
      const table = `ingest_bench_${process.pid}`;
      await pool.query(
        `CREATE UNLOGGED TABLE ${table} (record_id text, dock_id text, bike_id int, serviced_at timestamptz, odometer_km float8, passed bool, kind text, note text)`,
      );
      sink = postgresSink<Row>({
        pool,
        table,
        mode: 'copy',
        columns: COLUMNS.map((c) => c.name),
        map: (r) => COLUMNS.map((c) => r[c.name]),
        maxRecords: 5000,
      });
      done = async () => {
        await pool.query(`DROP TABLE ${table}`);
        await pool.end();
      };
    } else sink = new Sink(nullAdapter, { maxRecords: 5000 });
    const s = await ingestFile(path, sink, { columns: COLUMNS });
    await sink.close();
    await done();
    rows = s.rowsWritten;
    bytes = s.bytesRead;
    if (s.rowsRejected > 0)
      throw new RangeError(`${s.rowsRejected} rows rejected: ${JSON.stringify(s.firstRejects.slice(0, 3))}`);
  }
  clearInterval(timer);
  peak = Math.max(peak, process.memoryUsage().rss);
  process.stdout.write(
    `${JSON.stringify({ mode, rows, bytes, ms: performance.now() - t0, peakRssBytes: peak })}\n`,
  );
}

interface RunResult {
  mode: string;
  rows: number;
  bytes: number;
  ms: number;
  peakRssBytes: number;
}

function runChild(mode: string, path: string): Promise<RunResult> {
  return new Promise((resolve, reject) => {
    const p = spawn(
      process.execPath,
      [...process.execArgv, fileURLToPath(import.meta.url), '--child', mode, path],
      { stdio: ['ignore', 'pipe', 'inherit'] },
    );
    let out = '';
    p.stdout.on('data', (d) => (out += d));
    p.on('exit', (code) =>
      code === 0
        ? resolve(JSON.parse(out.trim().split('\n').pop()!) as RunResult)
        : reject(new RangeError(`${mode} run exited ${code}`)),
    );
  });
}

const median = (xs: number[]) => [...xs].sort((a, b) => a - b)[Math.floor(xs.length / 2)]!;
const mib = (b: number) => (b / 1024 / 1024).toFixed(1);

async function main(): Promise<void> {
  const bytes = Number(process.env.INGEST_BYTES ?? 1024 ** 3);
  const runs = Number(process.env.INGEST_RUNS ?? 1);
  const store = process.env.INGEST_STORE ?? 'null';
  const path = process.env.INGEST_FILE ?? join(tmpdir(), `spillway-ingest-${bytes}.csv`);
  const existing = await stat(path).catch(() => undefined);
  if (!existing || existing.size < bytes) {
    const t0 = performance.now();
    const rows = await writeServiceRecords(path, bytes);
    process.stdout.write(
      `generated ${path}: ${rows} rows in ${((performance.now() - t0) / 1000).toFixed(1)} s\n`,
    );
  }
  const size = (await stat(path)).size;
  process.stdout.write(
    `machine: ${cpus().length} × ${cpus()[0]?.model ?? '?'}, ${mib(totalmem())} MiB, node ${process.version}\n`,
  );
  process.stdout.write(
    `file: ${mib(size)} MiB; store: ${store}; runs: ${runs} of each (baseline = read + count lines, no parsing)\n`,
  );
  const results: Record<string, RunResult[]> = { read: [], [store]: [] };
  for (let i = 0; i < runs; i++) {
    results.read!.push(await runChild('read', path));
    results[store]!.push(await runChild(store, path));
  }
  const summary = Object.fromEntries(
    Object.entries(results).map(([mode, rs]) => {
      const rss = rs.map((r) => r.peakRssBytes);
      const mbps = rs.map((r) => r.bytes / 1024 / 1024 / (r.ms / 1000));
      return [
        mode,
        {
          runs: rs.length,
          rows: rs[0]!.rows,
          peakRssMiB: { median: +mib(median(rss)), min: +mib(Math.min(...rss)), max: +mib(Math.max(...rss)) },
          mibPerSecond: {
            median: +median(mbps).toFixed(1),
            min: +Math.min(...mbps).toFixed(1),
            max: +Math.max(...mbps).toFixed(1),
          },
          rowsPerSecond: Math.round(median(rs.map((r) => r.rows / (r.ms / 1000)))),
        },
      ];
    }),
  );
  const base = summary.read!;
  const ing = summary[store]!;
  process.stdout.write(`${JSON.stringify(summary, null, 2)}\n`);
  process.stdout.write(
    `peak RSS ingest ${ing.peakRssMiB.median} MiB (range ${ing.peakRssMiB.min}–${ing.peakRssMiB.max}) vs read-only ${base.peakRssMiB.median} MiB: ` +
      `ratio ${(ing.peakRssMiB.median / base.peakRssMiB.median).toFixed(2)}; throughput ${ing.mibPerSecond.median} MiB/s = ` +
      `${(ing.mibPerSecond.median / base.mibPerSecond.median).toFixed(3)} × read-only\n`,
  );
}

if (process.argv[2] === '--child') await child(process.argv[3]!, process.argv[4]!);
else await main();
