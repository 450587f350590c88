// `spillway tune --table` against the real PostgreSQL: the command in-process for its outputs and
// its refusals, and as a child process for Ctrl-C, which must drop the scratch copy before exiting.
import { mkdtemp, readFile, rm, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { registerTune } from '../../packages/cli/src/commands/tune.js';
import { services, type TestSchema, withSchema } from '../harness/index.js';
import { runSubcommand } from './cli-in-process.js';
import { interruptTune } from './tune-interrupt.js';

let db: TestSchema;
let dir: string;
let url: string;

beforeAll(async () => {
  db = await withSchema('tune_cli');
  url = services().pgUrl;
  await db.pool.query(`CREATE TABLE docks (dock_id integer PRIMARY KEY, station_id text NOT NULL,
    bikes_available integer NOT NULL, status text NOT NULL, seen_at timestamptz NOT NULL)`);
  await db.pool.query(
    `INSERT INTO docks VALUES (1, 'district-1-st-1', 4, 'in_service', '2026-03-02T07:00:00Z')`,
  );
  dir = await mkdtemp(join(tmpdir(), 'spillway-tune-cli-'));
  const csv = ['dock_id,station_id,bikes_available,status,seen_at,firmware'];
  for (let i = 0; i < 400; i++)
    csv.push(
      `${i % 150},district-${i % 9}-st-${i % 31},${i % 21},${i % 7 ? 'in_service' : 'full'},2026-03-02T07:${String(Math.floor(i / 10) % 60).padStart(2, '0')}:00Z,4.${i % 3}`,
    );
  await writeFile(join(dir, 'docks.csv'), `${csv.join('\n')}\n`);
  await writeFile(
    join(dir, 'no-dock-id.csv'),
    'station_id,bikes_available,status,seen_at\ndistrict-1-st-1,4,full,2026-03-02T07:00:00Z\n',
  );
  await writeFile(
    join(dir, 'broken.ndjson'),
    '{"dock_id":1,"station_id":"a","bikes_available":1,"status":"full","seen_at":"2026-03-02T07:00:00Z"}\n{"dock_id":2,\n',
  );
});

afterAll(async () => {
  await db?.drop();
  if (dir) await rm(dir, { recursive: true, force: true });
});

/** Runs `spillway tune …args` in this process; returns its exit code, stdout and stderr. */
const spillway = (...args: string[]) => runSubcommand(registerTune, 'tune', args);

/** `spillway tune --to <url> --table <schema>.docks` and the flags; each `%s` takes the next path. */
function docks(flags: string, ...paths: string[]) {
  let i = 0;
  const args = flags.split(' ').map((f) => (f === '%s' ? paths[i++]! : f));
  return spillway('--to', url, '--table', `${db.schema}.docks`, ...args);
}

const userRows = async () => (await db.pool.query('SELECT count(*)::int AS n FROM docks')).rows[0].n;
const schemaExists = async (name: string) =>
  (await db.pool.query('SELECT 1 FROM pg_namespace WHERE nspname = $1', [name])).rowCount === 1;

describe('spillway tune --table', () => {
  it('refuses an unknown table, a sample without a required column, a malformed sample line, a key that is not unique and a bad rate, naming each', async () => {
    const table = ['--to', url, '--p99', '200', '--validate', '0', '--table', `${db.schema}.docks`];
    const refusals: [string[], string[]][] = [
      [['--to', url, '--p99', '200', '--table', `${db.schema}.nope`], [`"${db.schema}.nope"`]],
      [[...table, '--sample', join(dir, 'no-dock-id.csv')], ['no-dock-id.csv has no field "dock_id"']],
      [[...table, '--sample', join(dir, 'broken.ndjson')], ['broken.ndjson: line 2']],
      [
        [...table, '--mode', 'upsert', '--key', 'station_id'],
        ['unique index or primary key', '(dock_id)'],
      ],
    ];
    for (const [args, says] of refusals) {
      const r = await spillway(...args);
      expect(r.code).toBe(64);
      for (const text of says) expect(r.err).toContain(text);
    }

    const rate = await spillway(...table, '--rate', 'fast');
    expect(rate.code).not.toBe(0);
    expect(rate.err).toContain('--rate');
    expect(rate.err).toContain('"fast"');
    expect(await userRows()).toBe(1);
  });

  it('tunes an upsert on the user’s key from a CSV sample and prints the options, the trials and the chart; --json carries the same', async () => {
    const chart = join(dir, 'docks.svg');
    const r = await docks(
      '--mode upsert --key dock_id --sample %s --rate 300 --p99 300 --budget 4 --duration 500 --validate 1 --max-concurrency 2 --chart %s --json',
      join(dir, 'docks.csv'),
      chart,
    );
    expect([0, 3, 4]).toContain(r.code);
    const outcome = JSON.parse(r.out);
    expect(outcome.mode).toBe('upsert');
    expect(outcome.key).toEqual(['dock_id']);
    expect(outcome.records).toMatchObject({
      source: 'docks.csv',
      generated: false,
      rows: 400,
      ignored: ['firmware'],
    });
    expect(outcome.trials.length).toBeGreaterThan(0);
    for (const t of outcome.trials) expect(t.durable + t.deadLettered + t.stuck).toBe(t.offered);
    expect(outcome.chart).toBe(chart);
    const svg = await readFile(chart, 'utf8');
    expect(svg.startsWith('<svg')).toBe(true);
    expect(svg.match(/<circle /g)).toHaveLength(outcome.trials.length);
    expect(r.err).toMatch(/Plan: up to \d+ trials, about \d+ s, then a 1 s validation run/);
    expect(r.err).toMatch(/\[1\/\d+ \d+ s\] maxRecords/);
    expect(await userRows()).toBe(1);
  });

  it('inserts pass after pass of a small sample into a table with a primary key without a collision', async () => {
    const rows = ['dock_id,station_id,bikes_available,status,seen_at'];
    for (let i = 0; i < 40; i++)
      rows.push(`${1000 + i},district-2-st-${i},3,in_service,2026-03-02T08:00:00Z`);
    await writeFile(join(dir, 'small.csv'), `${rows.join('\n')}\n`);
    const r = await docks(
      '--mode insert --sample %s --rate 300 --p99 400 --budget 3 --duration 500 --validate 0 --chart %s --json',
      join(dir, 'small.csv'),
      join(dir, 'small.svg'),
    );
    const outcome = JSON.parse(r.out);
    expect(outcome.records.varied).toEqual([{ name: 'dock_id', how: 'offset' }]);
    // Each trial offers about 150 rows of a 40-row sample, so passes 2 to 4 must not collide.
    expect(outcome.trials.reduce((a: number, t: { offered: number }) => a + t.offered, 0)).toBeGreaterThan(
      200,
    );
    for (const t of outcome.trials) expect(t.deadLettered).toBe(0);
    expect(await userRows()).toBe(1);
  });

  it('replays the sample’s own timestamps at the asked rate, and prefills the copy before measuring', async () => {
    // docks.csv holds 400 reports, ten per minute of seen_at: replayed at 400 records/s.
    const r = await docks(
      '--mode upsert --sample %s --shape replay --timestamp-column seen_at --rate 400 --prefill 2000 --p99 400 --budget 3 --duration 500 --validate 0 --chart %s --json',
      join(dir, 'docks.csv'),
      join(dir, 'replay.svg'),
    );
    const outcome = JSON.parse(r.out);
    expect(outcome.load).toMatchObject({ shape: 'replay', rate: 400 });
    expect(outcome.prefilled).toBe(2000);
    expect(r.err).toContain('Prefilling the copy with 2,000 rows');
    // About 200 records in each half-second trial (fewer when the machine is slow to start a
    // trial), landing on the 150 keys the prefill wrote.
    for (const t of outcome.trials) {
      expect(t.offered).toBeGreaterThan(100);
      expect(t.offered).toBeLessThan(260);
      expect(t.deadLettered).toBe(0);
    }
    const noColumn = await docks(
      '--sample %s --shape replay --timestamp-column uploaded_at --p99 400 --validate 0',
      join(dir, 'docks.csv'),
    );
    expect(noColumn.code).toBe(64);
    expect(noColumn.err).toContain('has no field "uploaded_at" (--timestamp-column)');
    expect(await userRows()).toBe(1);
  });

  it('generates rows from the column types when no sample is given, and says so', async () => {
    const r = await docks(
      '--mode copy --rate 200 --p99 400 --budget 3 --duration 400 --validate 0 --chart %s',
      join(dir, 'gen.svg'),
    );
    expect([0, 3]).toContain(r.code);
    expect(r.err).toContain('No --sample: rows are generated from the column types');
    expect(r.out).toContain('rows generated from the column types (no --sample)');
    expect(r.out).toContain('| maxRecords | maxAgeMs | idleMs | concurrency | p99 ms |');
    if (r.code === 0) expect(r.out).toContain("mode: 'copy',");
    expect(await userRows()).toBe(1);
  });

  it('drops the scratch copy when interrupted by Ctrl-C (SIGINT) in the middle of the search, and exits 130', async () => {
    const r = await interruptTune(
      ['--to', url, '--table', `${db.schema}.docks`, '--sample', join(dir, 'docks.csv')],
      join(dir, 'int.svg'),
      /Scratch copy: ([a-z0-9_]+)\./,
      async (scratch) => expect(await schemaExists(scratch)).toBe(true),
    );
    expect(r.code).toBe(130);
    expect(r.stderr).toContain('interrupted by SIGINT; the scratch copy was dropped');
    expect(await schemaExists(r.scratch)).toBe(false);
    expect(await userRows()).toBe(1);
  });

  it('shows an example run on a user table, on Redis keys and on a Kafka topic, each with a sample file, in --help', async () => {
    const r = await spillway('--help');
    const help = r.out + r.err;
    expect(help).toContain('--table <schema.table>');
    expect(help).toContain('--sample <file>');
    expect(help).toContain('spillway tune --to postgres://');
    expect(help).toContain('--key-template <template>');
    expect(help).toContain(
      "spillway tune --to redis://127.0.0.1:6379 --key-template 'tandem:dock:{dock_id}'",
    );
    expect(help).toContain('--topic <name>');
    expect(help).toContain('spillway tune --to kafka://127.0.0.1:39661 --topic tandem.dock-events');
    expect(help).toContain('Validation: 10 s at 2,000 records/s on the scratch topic');
  });
});
