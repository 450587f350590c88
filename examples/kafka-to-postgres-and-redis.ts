// Tandem Bikes: dock status events from a Kafka topic, read in a consumer group, written to
// PostgreSQL (the event log) and Redis (live availability per dock). An offset is committed only
// once its event is durable in both stores; Ctrl-C or SIGTERM stops fetching, flushes both sinks,
// commits, and disconnects, in that order. Run two copies to watch the group share partitions.
//
//   npm run build    # once: the examples import the built packages by name
//   KAFKA_BROKERS=127.0.0.1:9092 DATABASE_URL=postgres://postgres@127.0.0.1:5432/postgres \
//   REDIS_URL=redis://127.0.0.1:6379 node --import tsx examples/kafka-to-postgres-and-redis.ts
//
// SEED_EVENTS (default 5000) events are published to the topic first, so there is something to
// read; STOP_AFTER_MS sends this process a SIGTERM after that long (to watch a graceful stop).
// Writes to the table tandem_example_dock_events and the keys tandem:example:dock:<id>.
import { fileDeadLetter, installShutdown, Sink } from '@spillway/core';
import { DecodeError, KafkaBridge } from '@spillway/kafka';
import { postgresSink } from '@spillway/postgres';
import { hashFields, redisAdapter } from '@spillway/redis';
import { Redis } from 'ioredis';
import { Kafka, logLevel, Partitioners } from 'kafkajs';
import pg from 'pg';

interface DockStatus {
  eventId: number;
  dockId: string;
  district: string;
  bikes: number;
  emptySlots: number;
  at: number;
}

const brokers = (process.env.KAFKA_BROKERS ?? '127.0.0.1:9092').split(',');
const topic = process.env.TOPIC ?? 'tandem.dock-status';
const seedEvents = Number(process.env.SEED_EVENTS ?? 5000);
const table = 'tandem_example_dock_events';

const kafka = new Kafka({ clientId: 'tandem-dock-status-writer', brokers, logLevel: logLevel.WARN });

// --- the topic, with some events on it
const admin = kafka.admin();
await admin.connect();
if (!(await admin.listTopics()).includes(topic)) {
  await admin.createTopics({ topics: [{ topic, numPartitions: 6 }], waitForLeaders: true });
}
await admin.disconnect();
if (seedEvents > 0) {
  const districts = ['Old Town', 'Harbour', 'University', 'Riverside', 'Market', 'Hillcrest'];
  const producer = kafka.producer({ idempotent: true, createPartitioner: Partitioners.DefaultPartitioner });
  await producer.connect();
  const base = Date.now();
  for (let from = 0; from < seedEvents; from += 1000) {
    const messages = [];
    for (let i = from; i < Math.min(seedEvents, from + 1000); i++) {
      const bikes = (i * 7) % 21;
      const event: DockStatus = {
        eventId: base + i,
        dockId: `DK-${String(i % 144).padStart(4, '0')}`,
        district: districts[i % 6] as string,
        bikes,
        emptySlots: 20 - bikes,
        at: Date.now(),
      };
      messages.push({ key: event.dockId, value: JSON.stringify(event) });
    }
    await producer.send({ topic, messages });
  }
  await producer.disconnect();
  console.log(`published ${seedEvents} dock events to ${topic}`);
}

// --- the stores and their sinks
const pool = new pg.Pool({
  connectionString: process.env.DATABASE_URL ?? 'postgres://postgres@127.0.0.1:5432/postgres',
  max: 4,
});
pool.on('error', () => undefined);
await pool.query(`CREATE TABLE IF NOT EXISTS ${table} (
  event_id bigint PRIMARY KEY, dock_id text NOT NULL, district text NOT NULL,
  bikes int NOT NULL, empty_slots int NOT NULL, seen_at timestamptz NOT NULL)`);
// Delivery is at least once (a crash before the commit re-reads), so the write is idempotent:
// a redelivered event hits its primary key and changes nothing.
const eventLog = postgresSink<DockStatus>({
  name: 'dock-event-log',
  pool,
  table,
  mode: 'upsert',
  conflict: { key: ['event_id'], action: 'nothing' },
  columns: ['event_id', 'dock_id', 'district', 'bikes', 'empty_slots', 'seen_at'],
  map: (e) => [e.eventId, e.dockId, e.district, e.bikes, e.emptySlots, new Date(e.at)],
  maxRecords: 1000,
  maxAgeMs: 500,
  deadLetter: fileDeadLetter('tandem-dock-event-log.dead-letters.ndjson'),
});

const redis = new Redis(process.env.REDIS_URL ?? 'redis://127.0.0.1:6379');
redis.on('error', () => undefined);
const availability = new Sink(
  redisAdapter<DockStatus>({
    client: redis,
    mapping: hashFields({
      key: (e) => `tandem:example:dock:${e.dockId}`,
      fields: (e) => ({ bikes: e.bikes, empty_slots: e.emptySlots, seen_at: new Date(e.at).toISOString() }),
    }),
  }),
  {
    name: 'dock-availability',
    maxRecords: 500,
    maxAgeMs: 200,
    deadLetter: fileDeadLetter('tandem-availability.dead-letters.ndjson'),
  },
);

// --- one shutdown sequence for the process: sources → sinks → progress (commits) → clients
const shutdown = installShutdown({ timeoutMs: 25_000 });
shutdown.addSink(eventLog);
shutdown.addSink(availability);
shutdown.add('clients', 'postgres pool', () => pool.end());
shutdown.add('clients', 'redis', async () => {
  await redis.quit();
});

const bridge = new KafkaBridge<DockStatus>({
  kafka,
  groupId: 'tandem-dock-status-writer',
  topics: [topic],
  fromBeginning: true,
  decode: (message) => {
    try {
      return JSON.parse(message.value?.toString('utf8') ?? '') as DockStatus;
    } catch (error) {
      return new DecodeError('not a JSON dock status event', { cause: error });
    }
  },
  // Every event goes to both stores; its offset is committed when both have it.
  route: () => [eventLog, availability],
  deadLetter: fileDeadLetter('tandem-undecodable.ndjson'),
  shutdown,
});
bridge.on('assign', (e) =>
  console.log(`assigned: ${e.assigned.join(', ') || 'none'} (generation ${e.generation})`),
);
await bridge.start();
console.log(`consuming ${topic} as group tandem-dock-status-writer; Ctrl-C to stop`);

const status = setInterval(async () => {
  const s = bridge.snapshot();
  const lag = s.partitions.reduce((sum, p) => sum + p.lagMessages, 0);
  const rows =
    (await pool.query<{ n: string }>(`SELECT count(*) AS n FROM ${table}`).catch(() => undefined))?.rows[0]
      ?.n ?? '?';
  console.log(
    `messages ${s.messages} · commits ${s.commits} · lag ${lag} · rows in ${table} ${rows} · buffered ${eventLog.pending().buffered}+${availability.pending().buffered}`,
  );
}, 2000);
status.unref();
shutdown.add('sources', 'status line', () => clearInterval(status));

const stopAfter = Number(process.env.STOP_AFTER_MS ?? 0);
if (stopAfter > 0) setTimeout(() => process.kill(process.pid, 'SIGTERM'), stopAfter).unref();
