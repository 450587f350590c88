// Ingest speed: `spillway ingest` of a generated CSV of Tandem Bikes service records into a logged
// PostgreSQL table (copy mode), with the header's columns as text and with a typed --columns spec,
// against `psql \copy … CSV HEADER` of the same file into the same table and against a raw read of
// the file (read + count line breaks). The same rows as NDJSON go through `spillway ingest` too
// (`jtext`: every value a JSON string, the columns named only; `jtyped`: JSON numbers and booleans,
// the typed spec), against the same psql baseline (the CSV of the same rows). Every sample is its own process, the four phases of a run
// back to back with a rotating order; ratios are taken within a run, then their median and spread.
// Prints rows/s, MB/s and each process's peak RSS. Nothing here asserts a time.
//
//   npm run build && node benchmarks/dist/ingest-speed.js
//   INGEST_MB=80 INGEST_RUNS=5 [INGEST_BATCH=10000] SPILLWAY_PG_URL=postgres://postgres@127.0.0.1:5432/test node benchmarks/dist/ingest-speed.js
//   INGEST_BASELINE_CLI=/path/to/an/older/checkout/packages/cli/dist/bin.js …   (adds phases text0,
//   typed0, jtext0, jtyped0: that CLI on the same files, in the same rotation, for before/after
//   ratios in one run)
//   INGEST_PHASES=psql,jtext,jtyped …   (only these phases; default: all)
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
/** The columns named, every one text: what a CSV header gives. */
const TEXT = 'record_id,dock_id,bike_id,serviced_at,odometer_km,passed,kind,note';
/** Child mode `read`: the baseline, the same file through a 256 KiB read stream, no parsing. */
async function readChild(path: string): Promise<void> {
  let lines = 0;
  for await (const chunk of createReadStream(path, { highWaterMark: 256 * 1024 })) {
    const b = chunk as Buffer;
    for (let i = b.indexOf(10); i >= 0; i = b.indexOf(10, i + 1)) lines++;
  }
  if (lines === 0) process.exitCode = 1;
}

// Written by every Node child at exit: its peak resident set (resourceUsage().maxRSS, KiB) and
// the CPU time it used (user + system, µs).
const RSS_HOOK =
  "data:text/javascript,import{writeFileSync}from'node:fs';process.on('exit',()=>{const u=process.resourceUsage();writeFileSync(process.env.SPILLWAY_RSS_OUT,u.maxRSS+' '+(u.userCPUTime+u.systemCPUTime))})";

interface Sample {
  ms: number;
  rssMiB: number | undefined;
  /** CPU time of the process (not of the server it wrote to), ms. */
  cpuMs: number | undefined;
  /** CPU time of the PostgreSQL backends that served it, ms (sampled; see BackendCpu). */
  serverMs: number | undefined;
}

const TICK_MS = 1000 / Number(spawnSync('getconf', ['CLK_TCK']).stdout?.toString().trim() || 100);

/**
 * The CPU time of the server backends serving one phase (its `application_name`), read from
 * /proc/<pid>/stat (utime + stime) every 20 ms while it runs: the server is on this machine.
 * A backend's last < 20 ms before it exits are not seen, and the sampler's own queries cost the
 * server a little; both are small against a phase of seconds. Undefined where /proc is not there.
 */
class BackendCpu {
  private readonly ticks = new Map<number, number>();
  private timer: NodeJS.Timeout | undefined;
  private busy = false;

  constructor(
    private readonly pool: pg.Pool,
    private readonly app: string,
  ) {}

  start(): void {
    if (!existsSync('/proc/self/stat')) return;
    this.timer = setInterval(() => void this.sample(), 20);
  }

  private async sample(): Promise<void> {
    if (this.busy) return;
    this.busy = true;
    try {
      const { rows } = await this.pool.query('SELECT pid FROM pg_stat_activity WHERE application_name = $1', [
        this.app,
      ]);
      for (const { pid } of rows as Array<{ pid: number }>) {
        const stat = await readFile(`/proc/${pid}/stat`, 'utf8').catch(() => undefined);
        if (stat === undefined) continue;
        // Fields after the command name: state is the first, utime the 12th, stime the 13th.
        const f = stat.slice(stat.lastIndexOf(')') + 2).split(' ');
        this.ticks.set(pid, Number(f[11]) + Number(f[12]));
      }
    } finally {
      this.busy = false;
    }
  }

  async stop(): Promise<number | undefined> {
    if (this.timer === undefined) return undefined;
    clearInterval(this.timer);
    while (this.busy) await new Promise((r) => setTimeout(r, 5));
    let ticks = 0;
    for (const t of this.ticks.values()) ticks += t;
    return ticks * TICK_MS;
  }
}

let phaseNo = 0;

async function timed(
  command: string,
  args: string[],
  rssOut: string | undefined,
  pool: pg.Pool,
): Promise<Sample> {
  const app = `spillway-ingest-speed-${process.pid}-${++phaseNo}`;
  const server = new BackendCpu(pool, app);
  server.start();
  const t0 = performance.now();
  const child = spawn(command, args, {
    stdio: ['ignore', 'ignore', 'pipe'],
    env: { ...process.env, PGAPPNAME: app, ...(rssOut && { SPILLWAY_RSS_OUT: rssOut }) },
  });
  let err = '';
  child.stderr.on('data', (d) => {
    if (err.length < 4000) err += d;
  });
  const [code] = (await once(child, 'exit')) as [number | null];
  const ms = performance.now() - t0;
  const serverMs = await server.stop();
  // Exit 0: every row written (the CLI's own contract); anything else spoils the sample.
  if (code !== 0) throw new Error(`${command} ${args.join(' ')} exited ${code}: ${err.slice(0, 1000)}`);
  let rssMiB: number | undefined;
  let cpuMs: number | undefined;
  if (rssOut) {
    const text = (await readFile(rssOut, 'utf8')).trim();
    if (command === '/usr/bin/time') {
      // time(1) -f '%U %S': user and system seconds.
      const [user, sys] = text.split(/\s+/).slice(-2).map(Number);
      cpuMs = (user! + sys!) * 1000;
    } else {
      const [rss, cpu] = text.split(' ').map(Number);
      rssMiB = rss! / 1024;
      cpuMs = cpu! / 1000;
    }
    await rm(rssOut, { force: true });
  }
  return { ms, rssMiB, cpuMs, serverMs };
}

async function main(): Promise<void> {
  const megabytes = Number(process.env.INGEST_MB ?? 80);
  const runs = Number(process.env.INGEST_RUNS ?? 3);
  // The CLI's batch size when set (default: the CLI's own).
  const batch = process.env.INGEST_BATCH;
  const url = process.env.SPILLWAY_PG_URL ?? 'postgres://postgres@127.0.0.1:5432/test';
  const cli = fileURLToPath(new URL('../../packages/cli/dist/bin.js', import.meta.url));
  const baselineCli = process.env.INGEST_BASELINE_CLI;
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
  // The same rows as NDJSON, stopped at the CSV's row count: typed values, and every value text.
  const jsonPath = join(tmpdir(), `spillway-ingest-speed-${megabytes}.ndjson`);
  const jsonTextPath = join(tmpdir(), `spillway-ingest-speed-${megabytes}-text.ndjson`);
  await writeServiceRecords(jsonPath, 0, { microseconds: true, format: 'ndjson', rows });
  await writeServiceRecords(jsonTextPath, 0, { microseconds: true, format: 'ndjson-text', rows });
  const fileBytes: Record<string, number> = {};
  for (const [name, p] of [
    ['jtext', jsonTextPath],
    ['jtyped', jsonPath],
  ] as const) {
    fileBytes[name] = fileBytes[`${name}0`] = (await stat(p)).size;
    console.log(`generated ${p}: ${((await stat(p)).size / 1048576).toFixed(1)} MiB`);
  }
  console.log(
    `machine: ${cpus().length} × ${cpus()[0]?.model.trim()}, ${(totalmem() / 1048576).toFixed(0)} MiB, node ${process.version}; load average ${load0.map((l) => l.toFixed(1)).join(' ')}`,
  );

  const pool = new pg.Pool({ connectionString: url, max: 2 });
  await pool.query('CREATE SCHEMA IF NOT EXISTS spillway_bench');
  await pool.query(`DROP TABLE IF EXISTS ${TABLE}`);
  await pool.query(`CREATE TABLE ${TABLE} (record_id text, dock_id text, bike_id int, serviced_at timestamptz,
    odometer_km double precision, passed boolean, kind text, note text)`);
  const havePsql = spawnSync('psql', ['--version']).status === 0;
  const haveTime = existsSync('/usr/bin/time');
  const timeOut = join(tmpdir(), `spillway-ingest-speed-${process.pid}.time`);
  if (!havePsql) console.log('psql not found: the psql ratios are left out');

  const ingestArgs = (typed: boolean, bin = cli, file = path, columns: string | undefined = undefined) => [
    '--import',
    RSS_HOOK,
    bin,
    'ingest',
    file,
    '--to',
    url,
    '--pg-schema',
    'spillway_bench',
    '--table',
    'ingest_speed',
    '--quiet',
    '--rejects',
    `${path}.rejects.ndjson`,
    ...(typed ? ['--columns', TYPED] : columns ? ['--columns', columns] : []),
    ...(batch ? ['--batch-size', batch] : []),
  ];
  const phases: Record<string, () => Promise<Sample>> = {
    read: () => timed(process.execPath, ['--import', RSS_HOOK, self, '--child-read', path], rssOut, pool),
    ...(havePsql && {
      // psql's own CPU time through time(1) where it is installed (psql is not a Node process).
      psql: () =>
        timed(
          haveTime ? '/usr/bin/time' : 'psql',
          [
            ...(haveTime ? ['-f', '%U %S', '-o', timeOut, 'psql'] : []),
            url,
            '-q',
            '-v',
            'ON_ERROR_STOP=1',
            '-c',
            `\\copy ${TABLE} FROM '${path}' CSV HEADER`,
          ],
          haveTime ? timeOut : undefined,
          pool,
        ),
    }),
    text: () => timed(process.execPath, ingestArgs(false), rssOut, pool),
    typed: () => timed(process.execPath, ingestArgs(true), rssOut, pool),
    jtext: () => timed(process.execPath, ingestArgs(false, cli, jsonTextPath, TEXT), rssOut, pool),
    jtyped: () => timed(process.execPath, ingestArgs(true, cli, jsonPath), rssOut, pool),
    ...(baselineCli && {
      text0: () => timed(process.execPath, ingestArgs(false, baselineCli), rssOut, pool),
      typed0: () => timed(process.execPath, ingestArgs(true, baselineCli), rssOut, pool),
      jtext0: () => timed(process.execPath, ingestArgs(false, baselineCli, jsonTextPath, TEXT), rssOut, pool),
      jtyped0: () => timed(process.execPath, ingestArgs(true, baselineCli, jsonPath), rssOut, pool),
    }),
  };
  const only = process.env.INGEST_PHASES?.split(',');
  const names = Object.keys(phases).filter((n) => !only || only.includes(n));
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

  console.log(
    '\nphase   rows/s (median, min–max)        MB/s    spread   peak RSS (max)   CPU µs/row, process + server (median, min–max)',
  );
  for (const name of names) {
    const rates = samples[name]!.map((s) => rows / (s.ms / 1000));
    const m = summary(rates);
    const rss = samples[name]!.map((s) => s.rssMiB).filter((x): x is number => x !== undefined);
    const perRow = (ms: number | undefined) => (ms === undefined ? undefined : (ms * 1000) / rows);
    const range = (xs: Array<number | undefined>) => {
      const ys = xs.filter((x): x is number => x !== undefined);
      if (ys.length === 0) return '—';
      const m = summary(ys);
      return `${m.median.toFixed(2)} (${m.min.toFixed(2)}–${m.max.toFixed(2)})`;
    };
    const cpu = `${range(samples[name]!.map((s) => perRow(s.cpuMs)))} + ${range(samples[name]!.map((s) => perRow(s.serverMs)))}`;
    console.log(
      `${name.padEnd(7)} ${fmt(m.median).padStart(10)} (${fmt(m.min)}–${fmt(m.max)})`.padEnd(41) +
        `${(((fileBytes[name] ?? bytes) / 1e6) * (m.median / rows)).toFixed(1).padStart(6)}  ${m.spreadPct.toFixed(0).padStart(5)} %   ${(rss.length > 0 ? `${Math.max(...rss).toFixed(0)} MiB` : '—').padEnd(16)} ${cpu}`,
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
  ratio('text', 'text0');
  ratio('typed', 'typed0');
  ratio('text0', 'psql');
  ratio('typed0', 'psql');
  ratio('jtext', 'psql');
  ratio('jtyped', 'psql');
  ratio('jtext', 'jtext0');
  ratio('jtyped', 'jtyped0');
  ratio('jtext0', 'psql');
  ratio('jtyped0', 'psql');
  // Rows per CPU second, process and server together: what the phase costs the machine, less
  // disturbed by the other work on it than its wall-clock time.
  const cpuRatio = (a: string, b: string) => {
    if (!samples[a] || !samples[b]) return;
    const total = (s: Sample) =>
      s.cpuMs === undefined || s.serverMs === undefined ? undefined : s.cpuMs + s.serverMs;
    const xs = samples[a]!.map((s, i) => {
      const ta = total(s);
      const tb = total(samples[b]![i]!);
      return ta === undefined || tb === undefined ? undefined : tb / ta;
    }).filter((x): x is number => x !== undefined);
    if (xs.length === 0) return;
    const m = summary(xs);
    console.log(
      `${`${a} ÷ ${b}`.padEnd(16)} ${m.median.toFixed(3)} (runs ${xs.map((x) => x.toFixed(3)).join(', ')}; spread ${m.spreadPct.toFixed(0)} %)`,
    );
  };
  console.log('\nratios of rows per CPU second (process + server), within each run:');
  cpuRatio('text', 'psql');
  cpuRatio('typed', 'psql');
  cpuRatio('text', 'text0');
  cpuRatio('typed', 'typed0');
  cpuRatio('text0', 'psql');
  cpuRatio('typed0', 'psql');
  cpuRatio('jtext', 'psql');
  cpuRatio('jtyped', 'psql');
  cpuRatio('jtext', 'jtext0');
  cpuRatio('jtyped', 'jtyped0');
  cpuRatio('jtext0', 'psql');
  cpuRatio('jtyped0', 'psql');
  console.log(
    `load average at the end: ${loadavg()
      .map((l) => l.toFixed(1))
      .join(' ')}`,
  );
  for (const p of [path, jsonPath, jsonTextPath]) await rm(`${p}.rejects.ndjson`, { force: true });
}

if (process.argv[2] === '--child-read') await readChild(process.argv[3]!);
else await main();
