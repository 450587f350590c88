// A PostgreSQL restart in the middle of a stream, staged on a PRIVATE server (the shared one
// serves the test files running beside this one): no row is lost, the retries show in the
// sink's metrics, and the process survives the idle connections the restart kills.
import { Sink } from '@spillway/core';
import { type PostgresAdapterOptions, postgresAdapter } from '@spillway/postgres';
import pg from 'pg';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { type PrivateServer, startPrivatePostgres, waitFor } from '../harness/index.js';

interface DockStatus {
  id: number;
  dock: string;
  bikes: number;
}

let server: PrivateServer;
let pool: pg.Pool;
let admin: pg.Pool;

beforeAll(async () => {
  server = await startPrivatePostgres();
  // The adapter must bring the pool 'error' listener itself: none is added here.
  pool = new pg.Pool({ connectionString: server.url, max: 3, connectionTimeoutMillis: 2000 });
  admin = new pg.Pool({ connectionString: server.url, max: 1 });
  admin.on('error', () => undefined);
});
afterAll(async () => {
  // pool.end() resolves once its clients are removed, before their sockets close; the server's
  // stop can then reach a closing client as 57P01, which the pool re-emits. The adapters have
  // detached by now, so the pool needs its own listener for this last step.
  pool?.on('error', () => undefined);
  await pool?.end().catch(() => undefined);
  await admin?.end().catch(() => undefined);
  await server?.stop();
});

const MODES: Array<[string, Partial<PostgresAdapterOptions<DockStatus>>]> = [
  ['insert', { mode: 'insert' }],
  ['copy', { mode: 'copy' }],
  ['upsert', { mode: 'upsert', conflict: { key: ['id'] }, upsertViaCopyAbove: 200 }],
];

describe.each(MODES)('%s mode across a server restart', (label, modeOptions) => {
  it('loses no row and counts the retries', async () => {
    const N = 30_000;
    const table = `restart_${label}`;
    await admin.query(`CREATE TABLE ${table} (id int PRIMARY KEY, dock text NOT NULL, bikes int NOT NULL)`);
    const adapter = postgresAdapter<DockStatus>({
      pool,
      table,
      columns: ['id', 'dock', 'bikes'],
      map: (s) => [s.id, s.dock, s.bikes],
      ...modeOptions,
    });
    const sink = new Sink(adapter, {
      maxRecords: 500,
      maxAgeMs: 50,
      concurrency: 2,
      retry: {
        maxAttempts: Number.POSITIVE_INFINITY,
        baseDelayMs: 50,
        maxDelayMs: 500,
        maxElapsedMs: 60_000,
      },
    });
    const retries: string[] = [];
    sink.on('retry', (e) => retries.push((e.error as Error).message));

    let durable = 0;
    sink.on('written', (e) => {
      durable += e.records;
    });

    let restarted: Promise<void> | undefined;
    for (let i = 1; i <= N; i++) {
      await sink.write({ id: i, dock: `dock-${i % 97}`, bikes: i % 13 });
      // Mid-stream: a third of the rows are durable, the rest are still to come.
      if (restarted === undefined && durable >= N / 3) restarted = server.restart({ downMs: 1500 });
    }
    await restarted;
    await sink.close({ timeoutMs: 90_000 });

    const snap = sink.snapshot();
    const stats = adapter.stats();
    console.log(
      `[postgres] restart ${label}: written ${snap.written}, retries ${snap.retries}, dead-lettered ${snap.deadLettered}, ` +
        `discarded connections ${stats.discardedConnections}, pool errors ${stats.poolErrors}; first retry: ${retries[0] ?? 'none'}`,
    );
    expect(restarted).toBeDefined();
    expect(snap.written).toBe(N);
    expect(snap.deadLettered).toBe(0);
    expect(snap.retries).toBeGreaterThan(0);
    const { rows } = await waitFor(
      'the server to answer',
      () =>
        admin
          .query<{ n: string; d: string; s: string }>(
            `SELECT count(*) AS n, count(DISTINCT id) AS d, sum(id) AS s FROM ${table}`,
          )
          .catch(() => undefined),
      { timeoutMs: 10_000, intervalMs: 100 },
    );
    expect(rows[0]).toEqual({ n: String(N), d: String(N), s: String((N * (N + 1)) / 2) });
  });
});
