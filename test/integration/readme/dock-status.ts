// The README's first example ("A sink in twenty lines") as a program under test: its variants,
// one run of it against a schema of its own, and what the table holds afterwards.
import { existsSync, mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { services, withSchema } from '../../harness/index.js';
import { fencedBlocks, readmeBlocks } from './blocks.js';
import { type Program, program } from './project.js';
import { type RunResult, startProgram, whileRunning } from './run.js';

export const blocks = readmeBlocks();

export function readmeProgram(name: string): Program {
  const block = blocks.find((b) => b.name === name);
  if (!block) throw new Error(`no README block is named ${name}`);
  return program(block, blocks);
}

/** The README's `CREATE TABLE dock_status …`, run as it stands before each run. */
export const createDockStatus = (() => {
  const sql = fencedBlocks('README.md', 'sql').find((s) => s.includes('CREATE TABLE dock_status'));
  if (!sql) throw new Error('README.md has no sql block creating dock_status');
  return sql;
})();

/** The first report's time in the README's dockFeed(); report i is `i` seconds later. */
export const FEED_START_MS = Date.parse('2026-06-01T05:00:00Z');

/** A connection string whose sessions use `schema`, as the README says a user can write it. */
export function urlForSchema(schema: string): string {
  const url = new URL(services().pgUrl);
  url.searchParams.set('options', `-c search_path=${schema}`);
  return url.toString();
}

export interface TableRows {
  rows: number;
  distinctTimes: number;
  /** Seconds from FEED_START to the first and the last report in the table (null when empty). */
  firstSecond: number | null;
  lastSecond: number | null;
}

export interface DockRun {
  result: RunResult;
  table: TableRows;
  /** Whether the program created its dead-letter file (nothing is refused here: it must not). */
  deadLettered: boolean;
}

/**
 * Runs a compiled variant of the first example against a fresh schema. With `signal`, waits until
 * the table holds `afterRows` rows (default 1: the program is then mid-stream, its writes waiting
 * for room), sends the signal, and waits for the exit.
 */
export async function runDockStatus(
  js: string,
  options: { signal?: NodeJS.Signals; afterRows?: number; limit?: number; env?: Record<string, string> },
): Promise<DockRun> {
  const schema = await withSchema('readme');
  const dir = mkdtempSync(join(tmpdir(), 'spillway-readme-run-'));
  try {
    await schema.pool.query(createDockStatus);
    const deadLetterFile = join(dir, 'dock-status.dead.ndjson');
    const env: Record<string, string> = {
      DATABASE_URL: urlForSchema(schema.schema),
      DEAD_LETTER_FILE: deadLetterFile,
      ...options.env,
    };
    if (options.limit !== undefined) env.DOCK_FEED_LIMIT = String(options.limit);
    const run = startProgram(js, { cwd: dir, env });
    if (options.signal) {
      const afterRows = options.afterRows ?? 1;
      await whileRunning(run, `${afterRows} rows in the table`, async () => {
        const { rows } = await schema.pool.query<{ n: number }>('SELECT count(*)::int AS n FROM dock_status');
        return rows[0]!.n >= afterRows;
      });
      run.child.kill(options.signal);
    }
    const result = await run.done;
    const { rows } = await schema.pool.query<{
      n: number;
      d: number;
      first: number | null;
      last: number | null;
    }>(
      `SELECT count(*)::int AS n, count(DISTINCT reported_at)::int AS d,
              extract(epoch FROM min(reported_at))::float8 * 1000 AS first,
              extract(epoch FROM max(reported_at))::float8 * 1000 AS last
         FROM dock_status`,
    );
    const r = rows[0]!;
    const second = (ms: number | null) => (ms === null ? null : Math.round((ms - FEED_START_MS) / 1000));
    return {
      result,
      table: { rows: r.n, distinctTimes: r.d, firstSecond: second(r.first), lastSecond: second(r.last) },
      deadLettered: existsSync(deadLetterFile),
    };
  } finally {
    await schema.drop();
    rmSync(dir, { recursive: true, force: true });
  }
}
