// Offsets stored with the data (@spillway/postgres `storeOffsets`) against the real server: every
// batch's transaction also moves the next offset to read per source partition, rows and offsets
// commit together or not at all (PostgreSQL documentation, Tutorial 3.4 "Transactions"), and the
// move is a compare-and-set (INSERT … ON CONFLICT … DO UPDATE … WHERE, PostgreSQL documentation,
// "INSERT", "ON CONFLICT Clause"), so a writer whose records are stored already writes nothing twice.
import { createServer, type Server, Socket } from 'node:net';
import type { Batch, RecordMeta } from '@spillway/core';
import { type PostgresAdapter, type PostgresAdapterOptions, postgresAdapter } from '@spillway/postgres';
import pg from 'pg';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { services, type TestSchema, uniqueName, withSchema } from '../harness/index.js';

interface DockEvent {
  seq: number;
  bikes: number;
}

const GROUP = 'dock-status-writer';
const TOPIC = 'tandem.dock-status';

let schema: TestSchema;
beforeAll(async () => {
  schema = await withSchema('stored_offsets');
  // Every adapter listens for the pool's idle-client errors; these tests make many adapters.
  schema.pool.setMaxListeners(100);
});
afterAll(async () => {
  await schema?.drop();
});

async function table(primaryKey: boolean): Promise<string> {
  const name = uniqueName('docks');
  await schema.pool.query(
    `CREATE TABLE ${name} (seq bigint NOT NULL${primaryKey ? ' PRIMARY KEY' : ''}, bikes int NOT NULL CHECK (bikes >= 0))`,
  );
  return name;
}

function adapter(
  name: string,
  mode: 'insert' | 'copy' | 'upsert',
  extra: Partial<PostgresAdapterOptions<DockEvent>> = {},
  pool: pg.Pool = schema.pool,
): PostgresAdapter<DockEvent> {
  return postgresAdapter<DockEvent>({
    pool,
    table: name,
    columns: [
      { name: 'seq', type: 'bigint' },
      { name: 'bikes', type: 'int' },
    ],
    map: (e) => [e.seq, e.bikes],
    mode,
    ...(mode === 'upsert' ? { conflict: { key: ['seq'] } } : {}),
    storeOffsets: { group: GROUP, table: `${name}_offsets` },
    ...extra,
  });
}

let batchId = 0;
/** Events `seq` in [from, to) of partition `seq % partitions`, at offset `floor(seq / partitions)`. */
function batch(
  from: number,
  to: number,
  partitions = 2,
  bikes = (seq: number) => seq % 13,
): Batch<DockEvent> {
  const records: DockEvent[] = [];
  const metas: RecordMeta[] = [];
  for (let seq = from; seq < to; seq++) {
    records.push({ seq, bikes: bikes(seq) });
    metas.push({ topic: TOPIC, partition: seq % partitions, offset: BigInt(Math.floor(seq / partitions)) });
  }
  return { id: ++batchId, reason: 'size', attempt: 1, records, metas, bytes: 0 };
}

async function rows(name: string): Promise<{ rows: number; distinct: number }> {
  const { rows: r } = await schema.pool.query<{ rows: string; distinct: string }>(
    `SELECT count(*) AS rows, count(DISTINCT seq) AS distinct FROM ${name}`,
  );
  return { rows: Number(r[0]!.rows), distinct: Number(r[0]!.distinct) };
}

async function stored(name: string): Promise<Record<string, string>> {
  const { rows: r } = await schema.pool.query<{ kpartition: number; next_offset: string }>(
    `SELECT kpartition, next_offset::text AS next_offset FROM ${name}_offsets
      WHERE consumer_group = $1 AND topic = $2 AND target = $3 ORDER BY kpartition`,
    [GROUP, TOPIC, `"${name}"`],
  );
  return Object.fromEntries(r.map((x) => [String(x.kpartition), x.next_offset]));
}

const partitions = [
  { topic: TOPIC, partition: 0 },
  { topic: TOPIC, partition: 1 },
];

describe('PostgreSQL offsets stored with the data', () => {
  // insert, copy, upsert through multi-row INSERT, and upsert through a staging table (COPY + merge).
  const paths = [
    ['insert', {}],
    ['copy', {}],
    ['upsert', { upsertViaCopyAbove: Number.POSITIVE_INFINITY }],
    ['upsert', { upsertViaCopyAbove: 10 }],
  ] as const;

  for (const [mode, extra] of paths) {
    const label = `${mode}${'upsertViaCopyAbove' in extra && extra.upsertViaCopyAbove === 10 ? ' (staging table)' : ''}`;

    it(`${label}: stores the next offset of every partition in the batch, in the batch's transaction`, async () => {
      const name = await table(mode === 'upsert');
      const a = adapter(name, mode, extra);
      await a.write(batch(0, 100));
      await a.write(batch(100, 201));
      expect(await rows(name)).toEqual({ rows: 201, distinct: 201 });
      // seq 200 is offset 100 of partition 0; seq 199 is offset 99 of partition 1.
      expect(await stored(name)).toEqual({ '0': '101', '1': '100' });
      expect(await a.storedOffsets(GROUP, partitions)).toEqual([
        { topic: TOPIC, partition: 0, offset: '101' },
        { topic: TOPIC, partition: 1, offset: '100' },
      ]);
    });

    it(`${label}: a batch the server refuses stores neither rows nor offsets`, async () => {
      const name = await table(mode === 'upsert');
      const a = adapter(name, mode, extra);
      await a.write(batch(0, 20));
      // bikes = -1 breaks the CHECK constraint (SQLSTATE 23514) at seq 25.
      const bad = batch(20, 40, 2, (seq) => (seq === 25 ? -1 : 1));
      await expect(a.write(bad)).rejects.toMatchObject({ driverCode: '23514' });
      expect(await rows(name)).toEqual({ rows: 20, distinct: 20 });
      expect(await stored(name)).toEqual({ '0': '10', '1': '10' });
    });

    it(`${label}: a record map() refuses stops its partition's stored offset at it, so a crash before its dead letter replays it instead of skipping it`, async () => {
      const name = await table(mode === 'upsert');
      const a = adapter(name, mode, {
        ...extra,
        map: (e) => {
          if (e.seq === 25) throw new Error('no bikes count for this dock');
          return [e.seq, e.bikes];
        },
      });
      await a.write(batch(0, 20));
      const result = await a.write(batch(20, 40));
      expect(result?.rejected.map((r) => r.index)).toEqual([5]); // seq 25
      expect(await rows(name)).toEqual({ rows: 39, distinct: 39 });
      // seq 25 is offset 12 of partition 1: that partition's stored offset stops there, while
      // partition 0 moves to the end of the batch.
      expect(await stored(name)).toEqual({ '0': '20', '1': '12' });
    });

    it(`${label}: a batch that holds a source message twice (fetched again after a rebalance while the first copy waited) writes it once`, async () => {
      const name = await table(mode === 'upsert');
      const a = adapter(name, mode, extra);
      const first = batch(0, 40);
      const again = batch(20, 40);
      const both: Batch<DockEvent> = {
        ...first,
        records: [...first.records, ...again.records],
        metas: [...first.metas, ...again.metas],
      };
      expect(await a.write(both)).toBeUndefined();
      expect(await rows(name)).toEqual({ rows: 40, distinct: 40 });
      expect(await stored(name)).toEqual({ '0': '20', '1': '20' });
    });

    it(`${label}: a writer whose records are stored already writes none of them again, and writes the rest`, async () => {
      const name = await table(mode === 'upsert');
      const owner = adapter(name, mode, extra);
      const zombie = adapter(name, mode, extra);
      await owner.write(batch(0, 60));
      // A member that lost its partitions still holds seq 0…89: 0…59 are in the table already.
      await zombie.write(batch(0, 90));
      expect(await rows(name)).toEqual({ rows: 90, distinct: 90 });
      expect(await stored(name)).toEqual({ '0': '45', '1': '45' });
      // And the whole batch again: nothing to write, reported durable.
      await zombie.write(batch(0, 90));
      expect(await rows(name)).toEqual({ rows: 90, distinct: 90 });
      expect(zombie.stats().offsetConflicts).toBe(2);
    });
  }

  it('keeps the offsets of each consumer group and each target table apart', async () => {
    const name = await table(false);
    const other = await table(false);
    await adapter(name, 'insert').write(batch(0, 10));
    await adapter(other, 'insert', { storeOffsets: { group: GROUP, table: `${name}_offsets` } }).write(
      batch(0, 4),
    );
    await adapter(name, 'insert', {
      storeOffsets: { group: 'another-group', table: `${name}_offsets` },
    }).write(batch(0, 2));
    expect(await stored(name)).toEqual({ '0': '5', '1': '5' });
    const { rows: r } = await schema.pool.query<{ n: string }>(`SELECT count(*) AS n FROM ${name}_offsets`);
    expect(Number(r[0]!.n)).toBe(6);
  });

  it('refuses to read the stored offsets of another consumer group, naming the option', async () => {
    const name = await table(false);
    await expect(adapter(name, 'insert').storedOffsets('some-other-group', partitions)).rejects.toMatchObject(
      {
        name: 'TypeError',
        code: 'SPILLWAY_INVALID_OPTION',
        message: expect.stringMatching(/`groupId`/),
      },
    );
  });

  it('rejects a storeOffsets option without a group, naming it', () => {
    expect(() => adapter('t', 'insert', { storeOffsets: { group: '' } })).toThrow(/`storeOffsets.group`/);
    expect(() => adapter('t', 'insert', { storeOffsets: { group: 'g', colour: 1 } as never })).toThrow(
      /`storeOffsets.colour`/,
    );
  });

  // The reply to COMMIT never arrives: a TCP relay in front of the real server passes COMMIT on
  // (or holds it back) and then cuts the client's connection.
  for (const landed of [true, false]) {
    it(`resolves a COMMIT whose outcome is unknown by reading the stored offsets back (${landed ? 'it landed' : 'it did not land'})`, async () => {
      const relay = await commitCutter(landed);
      const pool = new pg.Pool({
        connectionString: `postgres://postgres@127.0.0.1:${relay.port}/${new URL(services().pgUrl).pathname.slice(1)}`,
        options: `-c search_path="${schema.schema}"`,
        max: 2,
      });
      pool.on('error', () => undefined);
      try {
        for (const mode of ['insert', 'copy'] as const) {
          const name = await table(false);
          const a = adapter(name, mode, {}, pool);
          await a.write(batch(0, 10));
          relay.arm();
          const second = batch(10, 30);
          const outcome = await a.write(second).then(
            () => 'durable',
            (e: unknown) => e,
          );
          expect(relay.cuts).toBeGreaterThan(0);
          if (landed) {
            // Read back: the offsets moved, so the batch is durable and nothing is written twice.
            expect(outcome).toBe('durable');
            expect(a.stats().commitsResolved).toBe(1);
          } else {
            // Read back: the offsets did not move, so the error stands and the engine retries it.
            expect(outcome).toMatchObject({
              code: 'SPILLWAY_STORE_ERROR',
              details: { outcomeUnknown: true },
            });
            await a.write(second);
          }
          expect(await rows(name)).toEqual({ rows: 30, distinct: 30 });
          expect(await stored(name)).toEqual({ '0': '15', '1': '15' });
          relay.reset();
        }
      } finally {
        await pool.end();
        await relay.close();
      }
    });
  }
});

/**
 * A TCP relay to the test server. Once armed, the next client message that is a simple query
 * `COMMIT` is passed on (`landed`) or dropped, and the client's connection is cut before any
 * reply: the client cannot know whether the transaction committed.
 */
async function commitCutter(landed: boolean) {
  const target = new URL(services().pgUrl);
  const sockets = new Set<Socket>();
  let armed = false;
  const relay = {
    cuts: 0,
    port: 0,
    arm: () => void (armed = true),
    reset: () => void (relay.cuts = 0),
    close,
  };
  const server: Server = createServer((client) => {
    const upstream = new Socket();
    sockets.add(client).add(upstream);
    upstream.connect(Number(target.port || 5432), target.hostname);
    upstream.on('data', (d: Buffer) => client.write(d));
    client.on('data', (d: Buffer) => {
      // Simple query message: 'Q', Int32 length, the text, NUL (PostgreSQL protocol, "Query").
      if (armed && d[0] === 0x51 && d.subarray(5).toString('utf8').startsWith('COMMIT')) {
        armed = false;
        relay.cuts++;
        if (landed) upstream.end(d);
        else upstream.destroy();
        client.destroy();
        return;
      }
      upstream.write(d);
    });
    const drop = () => {
      client.destroy();
      upstream.destroy();
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
