// The partner upload server example (examples/partner-upload-server.ts) under 50 concurrent
// uploads: its resident memory before, at the peak, and after, in its own process as a user runs
// it. Each round sends UPLOADS uploads at once (5,000 service records each, ~19.5 MB in all) and
// checks that every row landed once; the server's RSS (/proc/<pid>/status: VmRSS, and VmHWM for
// the peak) is read before the first round, after each round, and the peak at the end. Nothing
// here asserts a size or a time.
//
//   npm run build && node benchmarks/dist/ingest-upload-server.js
//   UPLOADS=50 ROUNDS=3 SPILLWAY_PG_URL=postgres://postgres@127.0.0.1:5432/test node benchmarks/dist/ingest-upload-server.js
import { spawn } from 'node:child_process';
import { once } from 'node:events';
import { readFile } from 'node:fs/promises';
import { request } from 'node:http';
import { cpus, loadavg, totalmem } from 'node:os';
import { fileURLToPath } from 'node:url';
import pg from 'pg';

const ROWS = 5_000;
const row = (n: number) =>
  `SR-${n},DK-${String(n % 4000).padStart(4, '0')},${(n % 900) + 1},2024-05-01T10:00:00.123456Z,${n / 10},true,brakes,ok\r\n`;
const HEADER = 'record_id,dock_id,bike_id,serviced_at,odometer_km,passed,kind,note\r\n';

async function rssOf(pid: number): Promise<{ rss: number; hwm: number }> {
  const status = await readFile(`/proc/${pid}/status`, 'utf8');
  const kb = (key: string) => Number(new RegExp(`^${key}:\\s+(\\d+) kB`, 'm').exec(status)?.[1] ?? NaN);
  return { rss: kb('VmRSS') / 1024, hwm: kb('VmHWM') / 1024 };
}

function upload(port: number, partner: string, body: string): Promise<{ status: number; written: number }> {
  return new Promise((resolve, reject) => {
    const req = request(
      {
        host: '127.0.0.1',
        port,
        path: `/uploads/${partner}`,
        method: 'POST',
        headers: { 'content-type': 'text/csv' },
      },
      (res) => {
        let text = '';
        res.setEncoding('utf8');
        res.on('data', (d) => {
          text += d;
        });
        res.on('end', () => {
          const parsed = text ? (JSON.parse(text) as { rowsWritten?: number }) : {};
          resolve({ status: res.statusCode ?? 0, written: parsed.rowsWritten ?? 0 });
        });
      },
    );
    req.on('error', reject);
    // A chunked body, sent in pieces as a partner's client would.
    for (let i = 0; i < body.length; i += 64 * 1024) req.write(body.slice(i, i + 64 * 1024));
    req.end();
  });
}

async function main(): Promise<void> {
  const uploads = Number(process.env.UPLOADS ?? 50);
  const rounds = Number(process.env.ROUNDS ?? 3);
  const url = process.env.SPILLWAY_PG_URL ?? 'postgres://postgres@127.0.0.1:5432/test';
  const port = 18_000 + (process.pid % 1000);
  const example = fileURLToPath(new URL('../../examples/partner-upload-server.ts', import.meta.url));
  console.log(
    `machine: ${cpus().length} × ${cpus()[0]?.model.trim()}, ${(totalmem() / 1048576).toFixed(0)} MiB, node ${process.version}; load average ${loadavg()
      .map((l) => l.toFixed(1))
      .join(' ')}`,
  );

  const pool = new pg.Pool({ connectionString: url, max: 1 });
  await pool.query('CREATE SCHEMA IF NOT EXISTS spillway_bench');
  await pool.query('DROP TABLE IF EXISTS spillway_bench.service_records');
  const server = spawn(
    process.execPath,
    [
      ...(process.env.SERVER_IMPORT ? ['--import', process.env.SERVER_IMPORT] : []),
      '--import',
      'tsx',
      example,
    ],
    {
      stdio: ['ignore', 'pipe', 'inherit'],
      env: {
        ...process.env,
        PORT: String(port),
        DATABASE_URL: url,
        PGOPTIONS: '-c search_path=spillway_bench',
        MAX_CONCURRENT_UPLOADS: String(uploads),
      },
    },
  );
  // Ready when it says where it listens.
  await new Promise<void>((resolve, reject) => {
    server.once('exit', (code) => reject(new Error(`the example exited ${code}`)));
    server.stdout!.setEncoding('utf8');
    let out = '';
    server.stdout!.on('data', (d: string) => {
      out += d;
      if (out.includes('partner uploads on')) resolve();
    });
  });
  server.stdout!.resume();
  const pid = server.pid!;
  const bodies = Array.from({ length: uploads }, (_, u) => {
    let body = HEADER;
    for (let i = 0; i < ROWS; i++) body += row(u * ROWS + i);
    return body;
  });
  const inputMB = bodies.reduce((n, b) => n + Buffer.byteLength(b), 0) / 1e6;
  const before = await rssOf(pid);
  console.log(
    `${uploads} uploads of ${ROWS} rows each, ${inputMB.toFixed(1)} MB per round, ${rounds} round(s); server RSS before: ${before.rss.toFixed(0)} MiB`,
  );
  for (let r = 1; r <= rounds; r++) {
    const t0 = performance.now();
    const answers = await Promise.all(bodies.map((b, u) => upload(port, `partner-${u}`, b)));
    const bad = answers.filter((a) => a.status !== 200 || a.written !== ROWS).length;
    const { rows } = await pool.query('SELECT count(*)::int AS n FROM spillway_bench.service_records');
    const after = await rssOf(pid);
    console.log(
      `round ${r}: ${((performance.now() - t0) / 1000).toFixed(1)} s, ${bad} upload(s) not answered 200 with every row, table ${rows[0].n} rows; RSS ${after.rss.toFixed(0)} MiB (+${(after.rss - before.rss).toFixed(0)}), peak so far ${after.hwm.toFixed(0)} MiB (+${(after.hwm - before.rss).toFixed(0)})`,
    );
    if (bad > 0 || rows[0].n !== uploads * ROWS) process.exitCode = 1;
  }
  server.kill('SIGTERM');
  await once(server, 'exit');
  await pool.query('DROP TABLE IF EXISTS spillway_bench.service_records');
  await pool.end();
}

await main();
