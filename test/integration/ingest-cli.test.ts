// `spillway ingest` run in-process (the real command definition, parsed by commander) against
// the real PostgreSQL, Redis and Kafka servers: exit codes, summary file, reject file, targets.
import { spawn } from 'node:child_process';
import { copyFile, mkdtemp, readFile, rm, stat, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { registerIngest } from '../../packages/cli/src/commands/ingest.js';
import {
  services,
  type TestKafka,
  type TestRedis,
  type TestSchema,
  withKafka,
  withRedis,
  withSchema,
} from '../harness/index.js';
import { runSubcommand } from './cli-in-process.js';

const SAMPLES = new URL('../../examples/data/', import.meta.url);
const SPEC =
  'record_id!,dock_id!,bike_id:integer!,serviced_at:timestamp!,odometer_km:number,passed:boolean,kind,note';

let db: TestSchema;
let redis: TestRedis;
let kafka: TestKafka;
let dir: string;
beforeAll(async () => {
  [db, redis, kafka] = await Promise.all([withSchema('ingest_cli'), withRedis('ingest_cli'), withKafka()]);
  dir = await mkdtemp(join(tmpdir(), 'spillway-ingest-cli-'));
  for (const f of ['service-records.csv', 'service-records-with-errors.csv', 'service-records.ndjson'])
    await copyFile(new URL(f, SAMPLES), join(dir, f));
  await db.pool.query(`CREATE TABLE service_records (record_id text PRIMARY KEY, dock_id text NOT NULL, bike_id int NOT NULL,
    serviced_at timestamptz NOT NULL, odometer_km double precision, passed boolean, kind text, note text)`);
});
afterAll(async () => {
  await Promise.all([db?.drop(), redis?.drop(), kafka?.drop()]);
  await rm(dir, { recursive: true, force: true });
});

/** Runs `spillway ingest …args` in this process; returns its exit code, stdout and stderr. */
const spillway = (...args: string[]) => runSubcommand(registerIngest, 'ingest', args);

const pgTarget = () => {
  const url = new URL(services().pgUrl);
  url.searchParams.set('options', `-c search_path=${db.schema}`);
  return url.toString();
};

describe('spillway ingest', () => {
  it('exits 0 when every row is written, prints the summary and writes it as JSON', async () => {
    const summaryPath = join(dir, 'summary.json');
    const { code, out } = await spillway(
      join(dir, 'service-records.csv'),
      '--to',
      pgTarget(),
      '--table',
      'service_records',
      '--key',
      'record_id',
      '--columns',
      SPEC,
      '--progress',
      'none',
      '--summary',
      summaryPath,
    );
    expect(code).toBe(0);
    expect(out).toMatch(/rows written\s+5 \(durable\)/);
    const summary = JSON.parse(await readFile(summaryPath, 'utf8'));
    expect(summary).toMatchObject({
      rowsRead: 5,
      rowsWritten: 5,
      rowsRejected: 0,
      durable: true,
      format: 'csv',
    });
    const { rows } = await db.pool.query(`SELECT note FROM service_records WHERE record_id = 'SR-1003'`);
    expect(rows[0].note).toBe('rear tyre "slow leak" – replaced\nvalve checked twice');
  });

  it('exits 2 with rejects, and the reject file names their lines, columns and reasons', async () => {
    const rejects = join(dir, 'partner.rejects.csv');
    const { code, out } = await spillway(
      join(dir, 'service-records-with-errors.csv'),
      '--to',
      pgTarget(),
      '--table',
      'service_records',
      '--key',
      'record_id',
      '--columns',
      SPEC,
      '--progress',
      'none',
      '--rejects',
      rejects,
    );
    expect(code).toBe(2);
    expect(out).toMatch(/rows rejected\s+4/);
    expect((await stat(rejects)).mode & 0o777).toBe(0o600);
    const lines = (await readFile(rejects, 'utf8')).trim().split('\r\n');
    expect(lines[0]).toBe('line,column,reason,message,truncated,raw');
    expect(lines.slice(1).map((l) => l.split(',').slice(0, 3).join(','))).toEqual([
      '3,bike_id,type',
      '4,,column-count',
      '5,serviced_at,type',
      '7,dock_id,required',
    ]);
  });

  it('in copy mode sends rows in runs, and a row the store refuses inside a run is rejected alone with its line and SQLSTATE', async () => {
    await db.pool.query(
      'CREATE TABLE service_runs (id int PRIMARY KEY, dock text NOT NULL, km int NOT NULL CHECK (km < 1000), note text)',
    );
    const n = 4000;
    let csv = 'id,dock,km,note\r\n';
    for (let i = 1; i <= n; i++)
      csv += `${i},DK-${i % 50},${i === 2345 ? 5000 : i % 900},${i % 9 === 0 ? '"chain\r\noiled"' : 'ok'}\r\n`;
    // Row 2345 starts on line 2 + 2344 + floor(2344 / 9) (every 9th row spans two lines).
    const line = 2 + 2344 + Math.floor(2344 / 9);
    const file = join(dir, 'service-runs.csv');
    await writeFile(file, csv);
    for (const columns of [[], ['--columns', 'id:integer!,dock!,km:integer!,note']]) {
      await db.pool.query('TRUNCATE service_runs');
      const rejects = join(dir, 'service-runs.rejects.ndjson');
      const summaryPath = join(dir, 'service-runs.summary.json');
      const { code } = await spillway(
        file,
        '--to',
        pgTarget(),
        '--table',
        'service_runs',
        ...columns,
        '--progress',
        'none',
        '--rejects',
        rejects,
        '--summary',
        summaryPath,
      );
      expect(code).toBe(2);
      const rejected = (await readFile(rejects, 'utf8'))
        .trim()
        .split('\n')
        .map((l) => JSON.parse(l));
      expect(rejected).toHaveLength(1);
      expect(rejected[0]).toMatchObject({ line, reason: 'store' });
      expect(rejected[0].message).toContain('SQLSTATE 23514');
      const { rows } = await db.pool.query(
        'SELECT count(*)::int AS n, count(DISTINCT id)::int AS ids, sum(id)::bigint AS sum FROM service_runs',
      );
      expect(rows[0]).toEqual({ n: n - 1, ids: n - 1, sum: String((n * (n + 1)) / 2 - 2345) });
      expect(JSON.parse(await readFile(summaryPath, 'utf8'))).toMatchObject({
        rowsRead: n,
        rowsWritten: n - 1,
        rowsDeadLettered: 1,
        durable: true,
      });
    }
  });

  it('exits 1 when more rows are rejected than --max-rejects allows', async () => {
    const { code, out } = await spillway(
      join(dir, 'service-records-with-errors.csv'),
      '--to',
      pgTarget(),
      '--table',
      'service_records',
      '--columns',
      SPEC,
      '--key',
      'record_id',
      '--max-rejects',
      '1',
      '--progress',
      'none',
    );
    expect(code).toBe(1);
    expect(out).toMatch(/^Stopped: More than 1 row\(s\) rejected/);
  });

  it('exits 1 and says why when the store fails (missing table)', async () => {
    const { code, out } = await spillway(
      join(dir, 'service-records.csv'),
      '--to',
      pgTarget(),
      '--table',
      'no_such_table',
      '--columns',
      SPEC,
      '--progress',
      'none',
    );
    expect(code).toBe(1);
    expect(out).toMatch(/42P01/);
  });

  it('writes rows as hashes into Redis with --key-template', async () => {
    const { code } = await spillway(
      join(dir, 'service-records.ndjson'),
      '--to',
      services().redisUrl,
      '--key-template',
      `${redis.prefix}{record_id}`,
      '--columns',
      SPEC,
      '--progress',
      'none',
    );
    expect(code).toBe(2); // line 5 of the sample is malformed JSON
    expect(await redis.redis.hgetall(`${redis.prefix}SR-3003`)).toEqual({
      record_id: 'SR-3003',
      dock_id: 'DK-0219',
      bike_id: '422',
      serviced_at: '2024-05-03T10:00:00Z', // as sent: timestamps are validated, not rewritten
      passed: 'false',
      kind: 'battery',
    });
  });

  it('writes rows as JSON messages to a Kafka topic, keyed by --message-key', async () => {
    const topic = await kafka.topic(1, 'ingest_cli');
    const { code } = await spillway(
      join(dir, 'service-records.csv'),
      '--to',
      `kafka://${services().kafkaBrokers.join(',')}`,
      '--topic',
      topic,
      '--message-key',
      'bike_id',
      '--columns',
      SPEC,
      '--progress',
      'none',
    );
    expect(code).toBe(0);
    const offsets = await kafka.admin.fetchTopicOffsets(topic);
    expect(offsets[0]?.high).toBe('5');
    const consumer = kafka.kafka.consumer({ groupId: `${topic}_check` });
    await consumer.connect();
    await consumer.subscribe({ topic, fromBeginning: true });
    const seen: Array<{ key: string; value: Record<string, unknown> }> = [];
    await new Promise<void>((resolve) => {
      void consumer.run({
        eachMessage: async ({ message }) => {
          seen.push({ key: String(message.key), value: JSON.parse(String(message.value)) });
          if (seen.length === 5) resolve();
        },
      });
    });
    await consumer.disconnect();
    expect(seen[0]).toEqual({
      key: '117',
      value: expect.objectContaining({
        record_id: 'SR-1001',
        bike_id: 117,
        serviced_at: '2024-05-01T08:12:00Z', // as sent
      }),
    });
  });

  it('exits 64 when the format cannot be told from the file name and --format is not given', async () => {
    await writeFile(join(dir, 'no-extension'), '{"record_id":"SR-1"}\n');
    const { code } = await spillway(
      join(dir, 'no-extension'),
      '--to',
      pgTarget(),
      '--table',
      'service_records',
      '--progress',
      'none',
    );
    expect(code).toBe(64);
  });

  it('runs as a process: reads standard input, prints progress lines to stderr when stdout is not a terminal', async () => {
    const input = Array.from(
      { length: 50 },
      (_, i) =>
        `{"record_id":"SR-${700_000 + i}","dock_id":"DK-0001","bike_id":${i + 1},"serviced_at":"2024-05-01T10:00:00Z"}\n`,
    ).join('');
    const run = await bin(
      [
        'ingest',
        '-',
        '--format',
        'ndjson',
        '--to',
        pgTarget(),
        '--table',
        'service_records',
        '--columns',
        SPEC,
        '--progress',
        'lines',
        '--rejects',
        join(dir, 'stdin.rejects.ndjson'),
      ],
      input,
    );
    expect(run.code).toBe(0);
    expect(run.stdout).toMatch(/rows written\s+50 \(durable\)/);
    expect(run.stderr).toMatch(/^progress: 50 rows read, 50 written, 0 rejected/m);
    const { rows } = await db.pool.query(
      `SELECT count(*)::int AS n FROM service_records WHERE record_id LIKE 'SR-7000%'`,
    );
    expect(rows[0].n).toBe(50);
  });

  it('runs as a process: exits 64 on a usage error, before touching any store', async () => {
    const run = await bin(['ingest', join(dir, 'service-records.csv')], '');
    expect(run.code).toBe(64);
    expect(run.stderr).toMatch(/required option '--to <url>' not specified/);
  });
});

const BIN = fileURLToPath(new URL('../../packages/cli/src/bin.ts', import.meta.url));
const TSCONFIG = fileURLToPath(new URL('./ingest-cli.tsconfig.json', import.meta.url));

/** Runs the `spillway` binary from source in its own process, with `stdin` as its standard input. */
function bin(
  args: string[],
  stdin: string,
): Promise<{ code: number | null; stdout: string; stderr: string }> {
  return new Promise((resolve, reject) => {
    const child = spawn(process.execPath, ['--import', 'tsx', BIN, ...args], {
      env: { ...process.env, TSX_TSCONFIG_PATH: TSCONFIG },
      stdio: ['pipe', 'pipe', 'pipe'],
    });
    let stdout = '';
    let stderr = '';
    child.stdout.on('data', (d: Buffer) => (stdout += d));
    child.stderr.on('data', (d: Buffer) => (stderr += d));
    child.on('error', reject);
    child.on('close', (code) => resolve({ code, stdout, stderr }));
    child.stdin.end(stdin);
  });
}
