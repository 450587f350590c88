// The README's other runnable examples, compiled as they stand and run as their own processes
// against the real servers: the first example ending in stream.pipeline() into toWritable() and in
// pipeInto(), the Redis availability program (packages/redis/README.md) and the partner-file
// ingest (packages/ingest/README.md). Each gets a SIGTERM mid-stream (exit 143, the store holds
// exactly what the sink accepted) and a 3-record input (exit 0, the 3 records stored); the only
// line a test adds is an 'exit' listener printing the sink's counters.
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { Readable } from 'node:stream';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { deleteRedisPrefix, services, uniqueName, withRedis, withSchema } from '../harness/index.js';
import { type DockRun, readmeProgram, runDockStatus, urlForSchema } from './readme/dock-status.js';
import { compiledProject, type Program, type ReadmeProject } from './readme/project.js';
import { describeRun, instrumented, type RunResult, startProgram, whileRunning } from './readme/run.js';

const asStream = instrumented(readmeProgram('sink-as-a-stream'), 'as-a-stream', 'docks');
const pipeInto = instrumented(readmeProgram('sink-fed-by-pipe-into'), 'pipe-into', 'docks');
const redis = instrumented(readmeProgram('redis-availability'), 'redis-availability', 'availability');
const ingest = instrumented(readmeProgram('ingest-a-partner-file'), 'ingest-a-partner-file', 'sink');
const programs: Program[] = [asStream, pipeInto, redis, ingest];

let project: ReadmeProject;
beforeAll(async () => {
  project = await compiledProject(programs);
});
afterAll(() => project?.remove());

/** Every run reports its counters at exit, and nothing was dead-lettered or left pending. */
function expectReport(result: RunResult, exitCode: number): NonNullable<RunResult['report']> {
  expect(result.code, describeRun(result)).toBe(exitCode);
  expect(result.report, describeRun(result)).toBeDefined();
  const report = result.report!;
  expect(report.written).toBe(report.accepted);
  expect(report.deadLettered).toBe(0);
  expect(report.pendingRecords).toBe(0);
  return report;
}

/** The first example's table holds reports 0 … accepted − 1, each once. */
function expectDockRun(run: DockRun, exitCode: number): void {
  const report = expectReport(run.result, exitCode);
  expect(run.table.rows).toBe(report.accepted);
  expect(run.table.distinctTimes).toBe(run.table.rows);
  if (run.table.rows > 0) expect(run.table.lastSecond).toBe(run.table.rows - 1);
  expect(run.deadLettered).toBe(false);
}

describe.concurrent('the first example ending in a stream pipeline or pipeInto()', () => {
  for (const p of [asStream, pipeInto]) {
    it(`${p.name}: exits 143 on SIGTERM mid-stream with every accepted report in the table (2 runs)`, async () => {
      for (let i = 0; i < 2; i++) {
        const run = await runDockStatus(project.js(p.name), { signal: 'SIGTERM' });
        expectDockRun(run, 143);
        expect(run.table.rows).toBeGreaterThan(0);
      }
    });

    it(`${p.name}: exits 0 after a feed of 3 reports, with the 3 rows in the table`, async () => {
      const run = await runDockStatus(project.js(p.name), { limit: 3 });
      expectDockRun(run, 0);
      expect(run.table.rows).toBe(3);
      if (p === pipeInto) expect(run.result.stdout).toContain('3 dock reports written');
    });
  }
});

describe.concurrent('the Redis availability example', () => {
  /** Runs the program with `lines` JSON lines on stdin (endless when `count` is undefined). */
  async function runRedis(count: number | undefined, signal?: NodeJS.Signals) {
    const { redisUrl } = services();
    const checker = await withRedis('readme-redis');
    const tag = uniqueName('readme');
    const dir = mkdtempSync(join(tmpdir(), 'spillway-readme-redis-'));
    const keyPrefix = `tandem:dock:${tag}-`;
    try {
      const run = startProgram(project.js(redis.name), {
        cwd: dir,
        env: { REDIS_URL: redisUrl, DEAD_LETTER_FILE: join(dir, 'availability.dead.ndjson') },
      });
      const feed = Readable.from(
        (function* () {
          for (let i = 0; count === undefined || i < count; i++) {
            const at = new Date(Date.UTC(2026, 5, 1, 5) + i * 1000).toISOString();
            yield `${JSON.stringify({ dockId: `${tag}-${i}`, bikes: i % 23, freeSlots: 23 - (i % 23), reportedAt: at })}\n`;
          }
        })(),
      );
      feed.pipe(run.child.stdin!);
      void run.done.then(() => feed.destroy());
      if (signal) {
        await whileRunning(
          run,
          'a key in Redis',
          async () => (await checker.redis.exists(`${keyPrefix}0`)) === 1,
        );
        run.child.kill(signal);
      }
      const result = await run.done;
      // Which reports are in Redis: their numbers, from the keys.
      const numbers: number[] = [];
      let cursor = '0';
      do {
        const [next, keys] = await checker.redis.scan(cursor, 'MATCH', `${keyPrefix}*`, 'COUNT', 1000);
        cursor = next;
        for (const k of keys) numbers.push(Number(k.slice(keyPrefix.length)));
      } while (cursor !== '0');
      numbers.sort((a, b) => a - b);
      const first = await checker.redis.hgetall(`${keyPrefix}0`);
      const ttl = await checker.redis.pttl(`${keyPrefix}0`);
      return { result, numbers, first, ttl };
    } finally {
      await deleteRedisPrefix(checker.redis, keyPrefix);
      await checker.drop();
      rmSync(dir, { recursive: true, force: true });
    }
  }

  it('exits 143 on SIGTERM mid-stream with a hash for every accepted report (2 runs)', async () => {
    for (let i = 0; i < 2; i++) {
      const { result, numbers } = await runRedis(undefined, 'SIGTERM');
      const report = expectReport(result, 143);
      expect(numbers.length).toBe(report.accepted);
      expect(numbers.length).toBeGreaterThan(0);
      expect(numbers.at(-1)).toBe(numbers.length - 1); // reports 0 … accepted − 1, none missing
    }
  });

  it('exits 0 at the end of a 3-line input, with the 3 hashes and their TTL', async () => {
    const { result, numbers, first, ttl } = await runRedis(3);
    expectReport(result, 0);
    expect(numbers).toEqual([0, 1, 2]);
    expect(first).toEqual({ bikes: '0', free: '23', at: '2026-06-01T05:00:00.000Z' });
    expect(ttl).toBeGreaterThan(0);
    expect(ttl).toBeLessThanOrEqual(15 * 60_000);
  });
});

describe.concurrent('the partner-file ingest example', () => {
  // The table the example upserts into (its columns are the example's `columns`).
  const createServiceRecords = `CREATE TABLE service_records (
    record_id text PRIMARY KEY, dock_id text NOT NULL, bike_id integer NOT NULL,
    serviced_at timestamptz NOT NULL, odometer_km numeric, passed boolean, kind text, note text)`;

  function csv(rows: number): string {
    const lines = ['record_id,dock_id,bike_id,serviced_at,odometer_km,passed,kind,note'];
    const kinds = ['brakes', 'chain', 'tyre', 'battery', 'lights'];
    for (let i = 0; i < rows; i++) {
      const at = new Date(Date.UTC(2024, 4, 1, 8) + i * 1000).toISOString();
      lines.push(
        `SR-${i},DK-${i % 400},${1 + (i % 900)},${at},${(i % 5000) / 10},true,${kinds[i % 5]},"checked, ok"`,
      );
    }
    return `${lines.join('\n')}\n`;
  }

  async function runIngest(rows: number, signal?: NodeJS.Signals) {
    const schema = await withSchema('readme_ingest');
    const dir = mkdtempSync(join(tmpdir(), 'spillway-readme-ingest-'));
    try {
      await schema.pool.query(createServiceRecords);
      writeFileSync(join(dir, 'velofix-2024-05.csv'), csv(rows));
      const run = startProgram(project.js(ingest.name), {
        cwd: dir,
        env: { DATABASE_URL: urlForSchema(schema.schema) },
      });
      if (signal) {
        await whileRunning(run, 'a row in the table', async () => {
          const { rows: r } = await schema.pool.query<{ n: number }>(
            'SELECT count(*)::int AS n FROM service_records',
          );
          return r[0]!.n > 0;
        });
        run.child.kill(signal);
      }
      const result = await run.done;
      const { rows: r } = await schema.pool.query<{ n: number; last: number | null }>(
        `SELECT count(*)::int AS n, max(substr(record_id, 4)::int) AS last FROM service_records`,
      );
      return { result, rows: r[0]!.n, last: r[0]!.last };
    } finally {
      await schema.drop();
      rmSync(dir, { recursive: true, force: true });
    }
  }

  it('exits 143 on SIGTERM mid-file with every accepted row in the table (2 runs)', async () => {
    for (let i = 0; i < 2; i++) {
      const { result, rows, last } = await runIngest(300_000, 'SIGTERM');
      const report = expectReport(result, 143);
      expect(rows).toBe(report.accepted);
      expect(rows).toBeGreaterThan(0);
      expect(rows).toBeLessThan(300_000);
      expect(last).toBe(rows - 1); // rows SR-0 … SR-(accepted − 1), in file order
    }
  });

  it('exits 0 after a 3-row file, with the 3 rows in the table and the summary printed', async () => {
    const { result, rows } = await runIngest(3);
    expectReport(result, 0);
    expect(rows).toBe(3);
    expect(result.stdout).toContain('3 rows written, 0 rejected');
  });
});
