// Exactly-once into PostgreSQL (`storeOffsets`) across failures of the server itself:
// - a PRIVATE server is restarted twice while a consumer process (workers/bridge-worker.ts with
//   `exactlyOnce`) commits batches into an append-only table: every message is there once;
// - a COMMIT whose reply is lost while the server cannot be reached at all (so the stored offsets
//   cannot be read back at once) is settled by the compare-and-set of the retry: nothing twice.
// Resolving a lost COMMIT reply by reading the stored offsets back is in postgres-offsets.test.ts.
//
// SPILLWAY_EOS_MESSAGES (default 50,000) messages per mode.

import { createServer, type Server, Socket } from 'node:net';
import { join } from 'node:path';
import { type RecordMeta, Sink } from '@spillway/core';
import { postgresAdapter } from '@spillway/postgres';
import pg from 'pg';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import {
  type PrivateServer,
  services,
  startPrivatePostgres,
  type TestSchema,
  uniqueName,
  waitFor,
  withSchema,
} from '../harness/index.js';
import { createDockTable } from './workers/dock-rows.js';
import { groupFixture } from './workers/group-checks.js';
import { startWorker } from './workers/spawn.js';

const TOTAL = Number(process.env.SPILLWAY_EOS_MESSAGES ?? 50_000);
const PARTITIONS = 3;

describe('exactly-once into PostgreSQL across server restarts', () => {
  const f = groupFixture('eos_pg_restart');
  let server: PrivateServer;
  let pool: pg.Pool;
  beforeAll(async () => {
    server = await startPrivatePostgres();
    pool = new pg.Pool({ connectionString: server.url, max: 2 });
    pool.on('error', () => undefined);
  });
  afterAll(async () => {
    await pool?.end().catch(() => undefined);
    await server?.stop();
  });

  /** Rows, distinct `seq` values, smallest and largest `seq`; undefined while the server is down. */
  async function counts(table: string) {
    const r = await pool
      .query<{ rows: string; distinct: string; min: string | null; max: string | null }>(
        `SELECT count(*) AS rows, count(DISTINCT seq) AS distinct, min(seq) AS min, max(seq) AS max FROM ${table}`,
      )
      .catch(() => undefined);
    const c = r?.rows[0];
    if (c === undefined) return undefined;
    return {
      rows: Number(c.rows),
      distinct: Number(c.distinct),
      min: Number(c.min ?? -1),
      max: Number(c.max ?? -1),
    };
  }

  async function rowsAtLeast(table: string, n: number): Promise<number> {
    return waitFor(
      `${n} rows in ${table}`,
      async () => {
        const c = await counts(table);
        return c !== undefined && c.rows >= n ? c.rows : undefined;
      },
      { timeoutMs: 120_000, intervalMs: 20 },
    );
  }

  for (const mode of ['insert', 'copy'] as const) {
    it(`${mode} mode: two restarts while batches commit, ${TOTAL} messages: every message is in the table exactly once`, async () => {
      const topic = await f.kafka.topic(PARTITIONS, `eos_pg_${mode}`);
      const groupId = uniqueName(`eos_pg_${mode}`);
      const table = uniqueName(`eos_pg_${mode}`);
      await createDockTable(pool, table, 'insert');
      await f.checks.produce(topic, PARTITIONS, 0, TOTAL);
      const label = `eos_pg_restart_${mode}`;
      const worker = startWorker({
        label,
        brokers: services().kafkaBrokers,
        topic,
        groupId,
        pgUrl: server.url,
        tables: [{ table, mode }],
        deadLetterPath: join(f.dir, `${label}.dead-letter.ndjson`),
        exactlyOnce: true,
        // Small batches: many commits, so a restart finds some on their way.
        maxRecords: 250,
        maxAgeMs: 50,
      });
      await worker.waitFor('ready', (l) => l.event === 'ready');

      const atRestart: number[] = [];
      for (const share of [0.25, 0.6]) {
        atRestart.push(await rowsAtLeast(table, Math.floor(TOTAL * share)));
        await server.restart({ downMs: 1000 });
      }
      await f.checks.waitCommittedToEnd(groupId, topic);
      worker.child.kill('SIGTERM');
      const { code } = await worker.exited;

      const final = await counts(table);
      const last = worker.lines.filter((l) => l.event === 'stats').at(-1);
      const adapterStats = (last?.adapters as Array<Record<string, number>> | undefined)?.[0] ?? {};
      const { rows: stored } = await pool.query<{ kpartition: number; next_offset: string }>(
        'SELECT kpartition, next_offset::text AS next_offset FROM spillway_offsets WHERE consumer_group = $1 ORDER BY kpartition',
        [groupId],
      );
      console.log(
        `[exactly-once] postgres ${mode}: restarts at ${atRestart.join(' and ')} rows; after ${final?.rows} rows / ${final?.distinct} distinct; ` +
          `adapter: ${adapterStats.failed} failed writes, ${adapterStats.offsetConflicts} offset conflicts, ${adapterStats.commitsResolved} lost COMMIT replies resolved by reading back`,
      );
      // The restarts failed writes on their way (then retried).
      expect(adapterStats.failed).toBeGreaterThan(0);
      // Both restarts came while messages were still to be written.
      expect(atRestart.every((n) => n < TOTAL)).toBe(true);
      // Source: shell convention, exit status 128 + signal number (SIGTERM = 15).
      expect(code).toBe(143);
      expect(final).toEqual({ rows: TOTAL, distinct: TOTAL, min: 0, max: TOTAL - 1 });
      expect(Object.fromEntries(stored.map((s) => [s.kpartition, Number(s.next_offset)]))).toEqual({
        0: Math.ceil(TOTAL / 3),
        1: Math.ceil((TOTAL - 1) / 3),
        2: Math.ceil((TOTAL - 2) / 3),
      });
    });
  }
});

describe('a COMMIT whose reply is lost while the server cannot be reached', () => {
  let schema: TestSchema;
  beforeAll(async () => {
    schema = await withSchema('eos_pg_unreachable');
  });
  afterAll(async () => {
    await schema?.drop();
  });

  for (const mode of ['insert', 'copy'] as const) {
    it(`${mode} mode: the retry finds the batch's offsets stored and writes nothing twice`, async () => {
      const table = uniqueName('docks');
      await schema.pool.query(`CREATE TABLE ${table} (seq bigint NOT NULL, bikes int NOT NULL)`);
      const relay = await commitCutter();
      const pool = new pg.Pool({
        connectionString: `postgres://postgres@127.0.0.1:${relay.port}/${new URL(services().pgUrl).pathname.slice(1)}`,
        options: `-c search_path="${schema.schema}"`,
        max: 2,
      });
      pool.on('error', () => undefined);
      const adapter = postgresAdapter<{ seq: number }>({
        pool,
        table,
        columns: ['seq', 'bikes'],
        map: (e) => [e.seq, e.seq % 13],
        mode,
        storeOffsets: { group: 'dock-status-writer' },
      });
      const sink = new Sink(adapter, {
        maxRecords: 100,
        maxAgeMs: 60_000,
        idleMs: 60_000,
        retry: { baseDelayMs: 100, maxDelayMs: 300, maxAttempts: 100 },
      });
      const write = async (from: number, to: number) => {
        for (let seq = from; seq < to; seq++) {
          const meta: RecordMeta = {
            topic: 'tandem.dock-status',
            partition: seq % 2,
            offset: String(seq >> 1),
          };
          await sink.write({ seq }, meta);
        }
        await sink.flush();
      };
      try {
        await write(0, 100);
        // The next COMMIT reaches the server, its reply does not reach the client, and for the
        // next 1.5 s every new connection is cut at once: the stored offsets cannot be read back.
        relay.arm(1500);
        await write(100, 200);
        await sink.close();
        const stats = adapter.stats();
        expect(relay.cuts).toBe(1);
        expect(relay.refused).toBeGreaterThan(0);
        expect(stats.commitsResolved).toBe(0);
        expect(stats.offsetConflicts).toBeGreaterThan(0);
        expect(sink.snapshot()).toMatchObject({ written: 200, deadLettered: 0 });
        const { rows } = await schema.pool.query<{ n: string; d: string }>(
          `SELECT count(*) AS n, count(DISTINCT seq) AS d FROM ${table}`,
        );
        expect(rows[0]).toEqual({ n: '200', d: '200' });
      } finally {
        await pool.end();
        await relay.close();
      }
    });
  }
});

/**
 * A TCP relay to the test server. Once armed, the next client message that is a simple query
 * `COMMIT` is passed on, the client's connection is cut before any reply, and for `refuseMs` new
 * connections are cut as they come.
 */
async function commitCutter() {
  const target = new URL(services().pgUrl);
  const sockets = new Set<Socket>();
  let armed = false;
  let refuseUntil = 0;
  let refuseMs = 0;
  const relay = {
    cuts: 0,
    refused: 0,
    port: 0,
    arm(ms: number) {
      armed = true;
      refuseMs = ms;
    },
    close,
  };
  const server: Server = createServer((client) => {
    if (Date.now() < refuseUntil) {
      relay.refused++;
      client.destroy();
      return;
    }
    const upstream = new Socket();
    sockets.add(client).add(upstream);
    upstream.connect(Number(target.port || 5432), target.hostname);
    // Set once COMMIT went on: the server gets it in full and then the end of the connection.
    let passedOn = false;
    upstream.on('data', (d: Buffer) => {
      if (!passedOn) client.write(d);
    });
    client.on('data', (d: Buffer) => {
      // Simple query message: 'Q', Int32 length, the text, NUL (PostgreSQL protocol, "Query").
      if (armed && d[0] === 0x51 && d.subarray(5).toString('utf8').startsWith('COMMIT')) {
        armed = false;
        passedOn = true;
        relay.cuts++;
        refuseUntil = Date.now() + refuseMs;
        upstream.end(d);
        client.destroy();
        return;
      }
      upstream.write(d);
    });
    const drop = () => {
      client.destroy();
      if (!passedOn) upstream.destroy();
    };
    client.on('error', drop).on('close', drop);
    upstream.on('error', drop).on('close', drop);
  });
  await new Promise<void>((resolve) => server.listen(0, '127.0.0.1', resolve));
  relay.port = (server.address() as { port: number }).port;
  function close(): Promise<void> {
    for (const s of sockets) s.destroy();
    return new Promise((resolve) => server.close(() => resolve()));
  }
  return relay;
}
