// Ingest speed: `spillway ingest` of a generated CSV of Tandem Bikes service records into a logged
// PostgreSQL table (copy mode), with the header's columns as text and with a typed --columns spec,
// against `psql \copy … CSV HEADER` of the same file into the same table and against a raw read of
// the file (read + count line breaks). Every sample is its own process, the four phases of a run
// back to back with a rotating order; ratios are taken within a run, then their median and spread.
// Prints rows/s, MB/s and each process's peak RSS. Nothing here asserts a time.
//
//   npm run build && node benchmarks/dist/ingest-speed.js
//   INGEST_MB=80 INGEST_RUNS=5 SPILLWAY_PG_URL=postgres://postgres@127.0.0.1:5432/test node benchmarks/dist/ingest-speed.js
import { spawn, spawnSync } from 'node:child_process';
import { once } from 'node:events';
import { createReadStream, existsSync } from 'node:fs';
import { readFile, rm, stat } from 'node:fs/promises';
import { cpus, loadavg, tmpdir, totalmem } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import pg from 'pg';
import { fmt, summary } from './numbers.js';
import { writeServiceRecords } from './service-records.js';

const TABLE = 'spillway_bench.ingest_speed';
const TYPED =
  'record_id!,dock_id!,bike_id:integer!,serviced_at:timestamp!,odometer_km:number,passed:boolean,kind,note';
/** Child mode `read`: the baseline, the same file through a 256 KiB read stream, no parsing. */
async function readChild(path: string): Promise<void> {
  let lines = 0;
  for await (const chunk of createReadStream(path, { highWaterMark: 256 * 1024 })) {
    const b = chunk as Buffer;
    for (let i = b.indexOf(10); i >= 0; i = b.indexOf(10, i + 1)) lines++;
  }
  if (lines === 0) process.exitCode = 1;
}

// Written by every Node child at exit: its peak resident set (resourceUsage().maxRSS, KiB).
const RSS_HOOK =
  "data:text/javascript,import{writeFileSync}from'node:fs';process.on('exit',()=>writeFileSync(process.env.SPILLWAY_RSS_OUT,String(process.resourceUsage().maxRSS)))";

interface Sample {
  ms: number;
  rssMiB: number | undefined;
}

async function timed(command: string, args: string[], rssOut: string | undefined): Promise<Sample> {
  const t0 = performance.now();
  const child = spawn(command, args, {
    stdio: ['ignore', 'ignore', 'pipe'],
    env: { ...process.env, ...(rssOut && { SPILLWAY_RSS_OUT: rssOut }) },
  });
  let err = '';
  child.stderr.on('data', (d) => {
    if (err.length < 4000) err += d;
  });
  const [code] = (await once(child, 'exit')) as [number | null];
  const ms = performance.now() - t0;
  // Exit 0: every row written (the CLI's own contract); anything else spoils the sample.
  if (code !== 0) throw new Error(`${command} ${args.join(' ')} exited ${code}: ${err.slice(0, 1000)}`);
  let rssMiB: number | undefined;
  if (rssOut) {
    rssMiB = Number(await readFile(rssOut, 'utf8')) / 1024;
    await rm(rssOut, { force: true });
  }
  return { ms, rssMiB };
}

async function main(): Promise<void> {
  const megabytes = Number(process.env.INGEST_MB ?? 80);
  const runs = Number(process.env.INGEST_RUNS ?? 3);
  const url = process.env.SPILLWAY_PG_URL ?? 'postgres://postgres@127.0.0.1:5432/test';
  const cli = fileURLToPath(new URL('../../packages/cli/dist/bin.js', import.meta.url));
  const self = fileURLToPath(import.meta.url);
  const path = join(tmpdir(), `spillway-ingest-speed-${megabytes}.csv`);
  const rssOut = join(tmpdir(), `spillway-ingest-speed-${process.pid}.rss`);
  const load0 = loadavg();

  const t0 = performance.now();
  const rows = await writeServiceRecords(path, megabytes * 1024 * 1024, { microseconds: true });
  const bytes = (await stat(path)).size;
  console.log(
    `generated ${path}: ${fmt(rows)} rows, ${(bytes / 1048576).toFixed(1)} MiB in ${((performance.now() - t0) / 1000).toFixed(1)} s`,
  );
  console.log(
    `machine: ${cpus().length} × ${cpus()[0]?.model.trim()}, ${(totalmem() / 1048576).toFixed(0)} MiB, node ${process.version}; load average ${load0.map((l) => l.toFixed(1)).join(' ')}`,
  );

  const pool = new pg.Pool({ connectionString: url, max: 1 });
  await pool.query('CREATE SCHEMA IF NOT EXISTS spillway_bench');
  await pool.query(`DROP TABLE IF EXISTS ${TABLE}`);
  await pool.query(`CREATE TABLE ${TABLE} (record_id text, dock_id text, bike_id int, serviced_at timestamptz,
    odometer_km double precision, passed boolean, kind text, note text)`);
  const havePsql = spawnSync('psql', ['--version']).status === 0;
  if (!havePsql) console.log('psql not found: the psql ratios are left out');

  const ingestArgs = (typed: boolean) => [
    '--import',
    RSS_HOOK,
    cli,
    'ingest',
    path,
    '--to',
    url,
    '--pg-schema',
    'spillway_bench',
    '--table',
    'ingest_speed',
    '--quiet',
    '--rejects',
    `${path}.rejects.ndjson`,
    ...(typed ? ['--columns', TYPED] : []),
  ];
  const phases: Record<string, () => Promise<Sample>> = {
    read: () => timed(process.execPath, ['--import', RSS_HOOK, self, '--child-read', path], rssOut),
    ...(havePsql && {
      psql: () =>
        timed(
          'psql',
          [url, '-q', '-v', 'ON_ERROR_STOP=1', '-c', `\\copy ${TABLE} FROM '${path}' CSV HEADER`],
          undefined,
        ),
    }),
    text: () => timed(process.execPath, ingestArgs(false), rssOut),
    typed: () => timed(process.execPath, ingestArgs(true), rssOut),
  };
  const names = Object.keys(phases);
  const samples: Record<string, Sample[]> = Object.fromEntries(names.map((n) => [n, []]));
  console.log(
    `runs: ${runs}, each phase once per run in a rotating order; table ${TABLE} (logged), copy mode`,
  );
  for (let r = 0; r < runs; r++) {
    const order = names.map((_, i) => names[(i + r) % names.length]!);
    const line: string[] = [];
    for (const name of order) {
      if (name !== 'read') await pool.query(`TRUNCATE ${TABLE}`);
      const s = await phases[name]!();
      if (name !== 'read') {
        const landed = (await pool.query(`SELECT count(*)::int AS n FROM ${TABLE}`)).rows[0].n as number;
        if (landed !== rows) throw new Error(`${name}: ${landed} rows in the table, expected ${rows}`);
      }
      samples[name]!.push(s);
      line.push(`${name} ${(s.ms / 1000).toFixed(2)} s`);
    }
    console.log(`run ${r + 1}: ${line.join(', ')}`);
  }
  await pool.query(`DROP TABLE IF EXISTS ${TABLE}`);
  await pool.end();

  console.log('\nphase   rows/s (median, min–max)        MB/s    spread   peak RSS (max)');
  for (const name of names) {
    const rates = samples[name]!.map((s) => rows / (s.ms / 1000));
    const m = summary(rates);
    const rss = samples[name]!.map((s) => s.rssMiB).filter((x): x is number => x !== undefined);
    console.log(
      `${name.padEnd(7)} ${fmt(m.median).padStart(10)} (${fmt(m.min)}–${fmt(m.max)})`.padEnd(41) +
        `${((bytes / 1e6) * (m.median / rows)).toFixed(1).padStart(6)}  ${m.spreadPct.toFixed(0).padStart(5)} %   ${rss.length > 0 ? `${Math.max(...rss).toFixed(0)} MiB` : '—'}`,
    );
  }
  const ratio = (a: string, b: string) => {
    if (!samples[a] || !samples[b]) return;
    // Per run: rate of a ÷ rate of b = time of b ÷ time of a.
    const xs = samples[a]!.map((s, i) => samples[b]![i]!.ms / s.ms);
    const m = summary(xs);
    console.log(
      `${`${a} ÷ ${b}`.padEnd(16)} ${m.median.toFixed(3)} (runs ${xs.map((x) => x.toFixed(3)).join(', ')}; spread ${m.spreadPct.toFixed(0)} %)`,
    );
  };
  console.log('\nratios of rows/s, within each run:');
  ratio('text', 'psql');
  ratio('typed', 'psql');
  ratio('text', 'read');
  ratio('typed', 'read');
  ratio('psql', 'read');
  console.log(
    `load average at the end: ${loadavg()
      .map((l) => l.toFixed(1))
      .join(' ')}`,
  );
  if (!existsSync(`${path}.rejects.ndjson`)) return;
  await rm(`${path}.rejects.ndjson`, { force: true });
}

if (process.argv[2] === '--child-read') await readChild(process.argv[3]!);
else await main();
