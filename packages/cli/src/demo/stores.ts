/**
 * The demo's three destinations, each a Spillway sink over the real adapter: dock status to
 * PostgreSQL (COPY), live availability to Redis (one hash per dock), enriched events to Kafka.
 * Each one can check afterwards that what it holds matches what was produced.
 */
import { join } from 'node:path';
import { fileDeadLetter, messageOf, type RecordMeta, Sink } from '@spillway/core';
import { kafkaProducerAdapter } from '@spillway/kafka';
import { postgresSink } from '@spillway/postgres';
import { hashFields, redisAdapter } from '@spillway/redis';
import { Redis } from 'ioredis';
import { Kafka, logLevel } from 'kafkajs';
import pg from 'pg';
import type { DockEvent } from './scenario.js';

/** A destination of the demo. */
export interface DemoStore {
  readonly sink: Sink<DockEvent>;
  /** One line on where the data goes, for the header. */
  readonly where: string;
  /** A live figure for the view (e.g. rows in the table), read now and then. */
  live?(): Promise<string>;
  /** Checks the store against what was produced; `ok` false means something is missing. */
  verify(expected: Expectation): Promise<Verification>;
  /** Ends the store's client. */
  close(): Promise<void>;
}

export interface Expectation {
  /** Events handed to the sinks. */
  produced: number;
  /** The last event of each dock that sent any. */
  lastByDock: ReadonlyMap<string, DockEvent>;
}

export interface Verification {
  ok: boolean;
  /** What was counted and how, e.g. `SELECT count(*) … = 61,532`; short lines. */
  lines: string[];
}

/** Common sink settings of the demo: small enough batches that every trigger shows up. */
export const DEMO_SINK_SETTINGS = {
  maxRecords: 500,
  maxAgeMs: 500,
  idleMs: 100,
  concurrency: 2,
  maxPendingRecords: 5000,
} as const;

const fmt = (n: number) => n.toLocaleString('en-US');

/** Ordering key: one district's uplink is one ordered stream. */
export function metaOf(e: DockEvent): RecordMeta {
  return { topic: 'dock-uplink', partition: e.district, offset: e.seq, eventTime: e.at };
}

export const TABLE = 'dock_status_events';

export async function postgresStore(url: string, schema: string, runDir: string): Promise<DemoStore> {
  const pool = new pg.Pool({ connectionString: url, max: 4 });
  // An idle client's error (server going away) must not crash the demo; the sink sees write errors.
  pool.on('error', () => undefined);
  const qualified = `"${schema}"."${TABLE}"`;
  await pool.query(`CREATE SCHEMA IF NOT EXISTS "${schema}"`);
  await pool.query(`DROP TABLE IF EXISTS ${qualified}`);
  // The primary key makes a duplicate write fail loudly instead of inflating the count.
  await pool.query(
    `CREATE TABLE ${qualified} (
       event_id bigint PRIMARY KEY,
       dock_id text NOT NULL,
       district text NOT NULL,
       seq bigint NOT NULL,
       bikes int NOT NULL,
       empty_slots int NOT NULL,
       status text NOT NULL,
       event_time timestamptz NOT NULL,
       written_at timestamptz NOT NULL DEFAULT now()
     )`,
  );
  const sink = postgresSink<DockEvent>({
    name: 'postgres',
    pool,
    schema,
    table: TABLE,
    mode: 'copy',
    columns: ['event_id', 'dock_id', 'district', 'seq', 'bikes', 'empty_slots', 'status', 'event_time'],
    map: (e) => [e.eventId, e.dockId, e.district, e.seq, e.bikes, e.emptySlots, e.status, new Date(e.at)],
    ...DEMO_SINK_SETTINGS,
    deadLetter: fileDeadLetter(join(runDir, 'postgres.dead-letters.ndjson')),
  });
  const count = async () =>
    Number((await pool.query<{ n: string }>(`SELECT count(*) AS n FROM ${qualified}`)).rows[0]?.n ?? 0);
  return {
    sink,
    where: `table ${schema}.${TABLE} (COPY)`,
    live: async () => `${fmt(await count())} rows`,
    async verify({ produced }) {
      const [n, distinct] = await Promise.all([
        count(),
        pool
          .query<{ n: string }>(`SELECT count(DISTINCT event_id) AS n FROM ${qualified}`)
          .then((r) => Number(r.rows[0]?.n ?? 0)),
      ]);
      const ok = n === produced && distinct === produced;
      return {
        ok,
        lines: [
          `SELECT count(*) FROM ${schema}.${TABLE}: ${fmt(n)} rows`,
          `${fmt(distinct)} distinct event_id; ${fmt(produced)} produced ${ok ? '= rows written' : '≠ rows written'}`,
        ],
      };
    },
    close: () => pool.end(),
  };
}

export async function redisStore(url: string, prefix: string, runDir: string): Promise<DemoStore> {
  const client = new Redis(url, { lazyConnect: true, maxRetriesPerRequest: 3 });
  client.on('error', () => undefined);
  await client.connect();
  const key = (dockId: string) => `${prefix}dock:${dockId}`;
  const adapter = redisAdapter<DockEvent>({
    client,
    mapping: hashFields({
      key: (e) => key(e.dockId),
      fields: (e) => ({
        bikes: e.bikes,
        empty_slots: e.emptySlots,
        status: e.status,
        event_id: e.eventId,
        seen_at: new Date(e.at).toISOString(),
      }),
    }),
  });
  const sink = new Sink(adapter, {
    name: 'redis',
    ...DEMO_SINK_SETTINGS,
    deadLetter: fileDeadLetter(join(runDir, 'redis.dead-letters.ndjson')),
  });
  return {
    sink,
    where: `hashes ${prefix}dock:<id> (pipelined HSET)`,
    async verify({ lastByDock }) {
      // Live availability is right when each dock's hash holds that dock's last event.
      let matching = 0;
      const docks = [...lastByDock.values()];
      const pipeline = client.pipeline();
      for (const e of docks) pipeline.hget(key(e.dockId), 'event_id');
      const replies = (await pipeline.exec()) ?? [];
      docks.forEach((e, i) => {
        if (replies[i]?.[1] === String(e.eventId)) matching++;
      });
      const ok = matching === docks.length;
      return {
        ok,
        lines: [`${fmt(matching)} of ${fmt(docks.length)} dock hashes hold their dock's last event`],
      };
    },
    close: async () => {
      await client.quit().catch(() => client.disconnect());
    },
  };
}

/** Fields added on the way to Kafka: what a rebalancing crew needs to read. */
function enrich(e: DockEvent) {
  return {
    ...e,
    capacity: e.bikes + e.emptySlots,
    fill: Math.round((e.bikes / (e.bikes + e.emptySlots)) * 100) / 100,
    needsRebalancing: e.bikes <= 2 || e.emptySlots <= 2,
  };
}

export async function kafkaStore(
  brokers: readonly string[],
  topic: string,
  runDir: string,
): Promise<DemoStore> {
  const kafka = new Kafka({ clientId: 'tandem-demo', brokers: [...brokers], logLevel: logLevel.NOTHING });
  const admin = kafka.admin();
  await admin.connect();
  const existing = await admin.listTopics();
  if (!existing.includes(topic)) {
    await admin.createTopics({ topics: [{ topic, numPartitions: 6 }], waitForLeaders: true });
  }
  const total = async () => {
    const offsets = await admin.fetchTopicOffsets(topic);
    return offsets.reduce((sum, p) => sum + Number(p.high), 0);
  };
  // The topic may hold earlier runs: count only what this run appends.
  const before = await total();
  const adapter = kafkaProducerAdapter<DockEvent>({
    kafka,
    topic,
    mapper: (e) => ({ key: e.dockId, value: JSON.stringify(enrich(e)), timestamp: e.at }),
  });
  const sink = new Sink(adapter, {
    name: 'kafka',
    ...DEMO_SINK_SETTINGS,
    deadLetter: fileDeadLetter(join(runDir, 'kafka.dead-letters.ndjson')),
  });
  return {
    sink,
    where: `topic ${topic} (idempotent producer, acks=all)`,
    live: async () => `${fmt((await total()) - before)} messages`,
    async verify({ produced }) {
      const appended = (await total()) - before;
      const ok = appended === produced;
      return {
        ok,
        lines: [
          `topic high watermarks grew by ${fmt(appended)}`,
          `${fmt(produced)} produced ${ok ? '= messages appended' : '≠ messages appended'}`,
        ],
      };
    },
    close: async () => {
      await admin.disconnect().catch((e: unknown) => console.error(`kafka admin: ${messageOf(e)}`));
    },
  };
}
