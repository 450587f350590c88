// What integration test files import: the shared servers' addresses and isolation helpers.
// Test files run in parallel against the same servers, so everything a file makes carries a
// unique name and is removed by that file.
import { randomBytes } from 'node:crypto';
import { Redis, type RedisOptions } from 'ioredis';
import { type Admin, Kafka, type KafkaConfig, logLevel } from 'kafkajs';
import pg from 'pg';
import { inject } from 'vitest';
import type { ProvidedServices } from './global-setup.js';
import { waitFor } from './process.js';

export { type PrivateServer, startPrivateKafka, startPrivatePostgres, startPrivateRedis } from './faults.js';
export type { ProvidedServices } from './global-setup.js';
export { KAFKA_VERSION, type KafkaBroker, type StartKafkaOptions, startKafka } from './kafka.js';
export {
  type KafkaCluster,
  type KafkaClusterNode,
  type StartKafkaClusterOptions,
  startKafkaCluster,
} from './kafka-cluster.js';
export { sleep, waitFor } from './process.js';
export { type RedisCluster, startRedisCluster } from './redis-cluster.js';

/** Addresses of the shared servers, provided by test/harness/global-setup.ts. */
export function services(): ProvidedServices {
  return inject('services');
}

// One random tag per test file (each file gets its own module instance), plus a counter.
const fileTag = randomBytes(4).toString('hex');
let counter = 0;

/**
 * A name unique to this file and call: lowercase letters, digits and `_` only, at most 63
 * characters, so it is valid unquoted as a PostgreSQL identifier, inside a Redis key and as a
 * Kafka topic or group id.
 */
export function uniqueName(prefix = 't'): string {
  counter += 1;
  const clean =
    prefix
      .toLowerCase()
      .replace(/[^a-z0-9_]+/g, '_')
      .replace(/^[^a-z_]+/, '') || 't';
  const suffix = `_${fileTag}_${counter}`;
  return `${clean.slice(0, 63 - suffix.length)}${suffix}`;
}

// ---------------------------------------------------------------------------------------------
// PostgreSQL

export interface TestSchema {
  schema: string;
  /** A pool whose connections all have `search_path` set to the schema. */
  pool: pg.Pool;
  /** Connection settings for more clients on the same schema. */
  clientConfig: pg.ClientConfig;
  /** Ends the pool and drops the schema with everything in it. */
  drop(): Promise<void>;
}

/** Creates a fresh schema on the shared PostgreSQL server. Call `drop()` in afterAll. */
export async function withSchema(prefix = 'spw', poolConfig: pg.PoolConfig = {}): Promise<TestSchema> {
  const { pgUrl } = services();
  const schema = uniqueName(prefix);
  const admin = new pg.Client({ connectionString: pgUrl });
  await admin.connect();
  try {
    await admin.query(`CREATE SCHEMA "${schema}"`);
  } finally {
    await admin.end();
  }
  const clientConfig: pg.ClientConfig = { connectionString: pgUrl, options: `-c search_path="${schema}"` };
  const pool = new pg.Pool({ max: 4, ...clientConfig, ...poolConfig });
  // An idle client's error (server restart, network) must not crash the test process.
  pool.on('error', () => undefined);
  let dropped = false;
  return {
    schema,
    pool,
    clientConfig,
    async drop() {
      if (dropped) return;
      dropped = true;
      await pool.end().catch(() => undefined);
      const c = new pg.Client({ connectionString: pgUrl });
      await c.connect();
      try {
        await c.query(`DROP SCHEMA IF EXISTS "${schema}" CASCADE`);
      } finally {
        await c.end();
      }
    },
  };
}

// ---------------------------------------------------------------------------------------------
// Redis

/** A unique key prefix such as `spw:dock_1a2b3c4d_3:`. */
export function redisPrefix(prefix = 'spw'): string {
  return `spw:${uniqueName(prefix)}:`;
}

export interface TestRedis {
  prefix: string;
  redis: Redis;
  /** Deletes every key under the prefix, then closes the connection. */
  drop(): Promise<void>;
}

/** Deletes all keys that start with `prefix` (SCAN, never KEYS, so a big server is not blocked). */
export async function deleteRedisPrefix(redis: Redis, prefix: string): Promise<number> {
  let deleted = 0;
  let cursor = '0';
  do {
    const [next, keys] = await redis.scan(cursor, 'MATCH', `${prefix}*`, 'COUNT', 500);
    cursor = next;
    if (keys.length > 0) deleted += await redis.unlink(...keys);
  } while (cursor !== '0');
  return deleted;
}

/** A connection to the shared Redis and a unique key prefix. Call `drop()` in afterAll. */
// ioredis 6 declares `replyMapping` without `| undefined` in its constructor, unlike RedisOptions,
// so under exactOptionalPropertyTypes a RedisOptions value only fits without that key.
export async function withRedis(
  prefix = 'spw',
  options: Omit<RedisOptions, 'replyMapping'> = {},
): Promise<TestRedis> {
  const { redisUrl } = services();
  const keyPrefix = redisPrefix(prefix);
  // ioredis 6 types a RedisOptions field as `T | undefined` where its constructor takes `T`, which
  // exactOptionalPropertyTypes tells apart; the options object is handed on as it is.
  const redis = new Redis(redisUrl, { lazyConnect: true, ...(options as object) });
  await redis.connect();
  return {
    prefix: keyPrefix,
    redis,
    async drop() {
      await deleteRedisPrefix(redis, keyPrefix).catch(() => undefined);
      redis.disconnect();
    },
  };
}

// ---------------------------------------------------------------------------------------------
// Kafka (the broker has auto.create.topics.enable=false: create every topic first)

export function uniqueTopic(prefix = 'spw'): string {
  return uniqueName(prefix);
}

/** A kafkajs client for the shared broker; kafkajs' own logging is off unless asked for. */
export function kafkaClient(config: Partial<KafkaConfig> = {}, brokers = services().kafkaBrokers): Kafka {
  return new Kafka({ clientId: uniqueName('client'), brokers, logLevel: logLevel.NOTHING, ...config });
}

/**
 * Creates a topic and waits until every partition has a leader, so that a producer or consumer
 * started right after does not race the metadata.
 */
export async function createTopic(admin: Admin, name: string, partitions = 1): Promise<string> {
  // Leaders are awaited below, where a metadata error is retried: kafkajs' own waitForLeaders
  // gives up on the broker's UNKNOWN_TOPIC_OR_PARTITION, which a loaded broker answers at first.
  await admin.createTopics({
    topics: [{ topic: name, numPartitions: partitions, replicationFactor: 1 }],
    waitForLeaders: false,
  });
  await waitFor(
    `leaders for the ${partitions} partitions of ${name}`,
    async () => {
      const { topics } = await admin.fetchTopicMetadata({ topics: [name] });
      const parts = topics[0]?.partitions ?? [];
      return parts.length === partitions && parts.every((p) => p.leader >= 0) ? true : undefined;
    },
    { timeoutMs: 30_000, intervalMs: 100 },
  );
  return name;
}

export interface TestKafka {
  kafka: Kafka;
  admin: Admin;
  /** Creates a uniquely named topic, remembered for drop(). */
  topic(partitions?: number, prefix?: string): Promise<string>;
  /** Deletes the topics made here and disconnects the admin client. */
  drop(): Promise<void>;
}

/** A kafkajs client and connected admin for the shared broker. Call `drop()` in afterAll. */
export async function withKafka(config: Partial<KafkaConfig> = {}): Promise<TestKafka> {
  const kafka = kafkaClient(config);
  const admin = kafka.admin();
  await admin.connect();
  const made: string[] = [];
  return {
    kafka,
    admin,
    async topic(partitions = 1, prefix = 'spw') {
      const name = await createTopic(admin, uniqueTopic(prefix), partitions);
      made.push(name);
      return name;
    },
    async drop() {
      if (made.length > 0) await admin.deleteTopics({ topics: made, timeout: 10_000 }).catch(() => undefined);
      await admin.disconnect();
    },
  };
}
