// Leader failover with exactly-once on a three-broker cluster (replication 3, min.insync.replicas
// 2): the consumer bridge storing offsets with its rows in PostgreSQL, and the bridge feeding the
// transactional Kafka sink, each while a producer keeps writing and the leader of a partition is
// killed with -9. The killed broker stays down until the stream has finished: the clients must
// find the new leaders by themselves, lose nothing and write nothing twice.
//
// SPILLWAY_FAILOVER_EOS_MESSAGES (default 20,000) messages per test.
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileDeadLetter, Sink } from '@spillway/core';
import { KafkaBridge, type KafkaBridgeOptions, kafkaTransactionalAdapter } from '@spillway/kafka';
import type { Kafka, Producer } from 'kafkajs';
import { afterAll, beforeAll, beforeEach, describe, expect, it } from 'vitest';
import {
  type KafkaCluster,
  kafkaClient,
  sleep,
  startKafkaCluster,
  type TestSchema,
  uniqueName,
  uniqueTopic,
  waitFor,
  withSchema,
} from '../harness/index.js';
import {
  createDockTable,
  type DockRow,
  decodeDockEvent,
  dockEvent,
  encodeEvent,
  pgRowsAdapter,
} from './workers/dock-rows.js';
import { readTopic, readTopicJava } from './workers/read-topic.js';

const TOTAL = Number(process.env.SPILLWAY_FAILOVER_EOS_MESSAGES ?? 20_000);
const PARTITIONS = 3;

let cluster: KafkaCluster;
let kafka: Kafka;
let schema: TestSchema;
let dir: string;
const topics: string[] = [];

beforeAll(async () => {
  [cluster, schema] = await Promise.all([startKafkaCluster({ label: 'eos' }), withSchema('cluster_eos')]);
  console.log(`[cluster eos] ${cluster.nodes.length} nodes ready in ${cluster.startMs} ms`);
  // Client retries spread over ~30 s, longer than a leader election after a kill (a few seconds).
  kafka = kafkaClient({ retry: { retries: 10, initialRetryTime: 200, maxRetryTime: 5000 } }, cluster.brokers);
  dir = mkdtempSync(join(tmpdir(), 'spillway-cluster-eos-'));
});

afterAll(async () => {
  await cluster?.stop();
  await schema?.drop();
  if (dir) rmSync(dir, { recursive: true, force: true });
});

// Each test starts from a whole cluster: bring back whatever the last one killed.
beforeEach(async () => {
  await Promise.all(cluster.nodes.filter((n) => !n.running).map((n) => n.restart()));
  if (topics.length > 0) await cluster.waitForFullIsr(topics);
});

async function topic(prefix: string, partitions: number): Promise<string> {
  const name = await cluster.createTopic(uniqueTopic(prefix), partitions);
  topics.push(name);
  return name;
}

/**
 * The upstream service: TOTAL dock events, event `seq` to partition `seq % PARTITIONS`, in rounds
 * of 500 with a 100 ms pause between (a stream of some seconds, still going at the kill). One send per partition: kafkajs 2.2.4 can resolve a send spanning
 * brokers without having written a partition whose leader moved during it
 * (producer/sendMessages.js), and the input must hold every event once for the counts to mean
 * anything. `produced()` tells how far it got.
 */
function produceSlowly(producer: Producer, name: string): { done: Promise<void>; produced: () => number } {
  let produced = 0;
  const done = (async () => {
    while (produced < TOTAL) {
      const perPartition = Array.from({ length: PARTITIONS }, () => [] as Array<{ value: string }>);
      for (let i = 0; i < 500 && produced < TOTAL; i++, produced++)
        perPartition[produced % PARTITIONS]!.push({ value: encodeEvent(dockEvent(produced)) });
      await Promise.all(
        perPartition.map(async (messages, partition) => {
          if (messages.length === 0) return;
          const written = await producer.send({
            topic: name,
            acks: -1,
            messages: messages.map((m) => ({ ...m, partition })),
          });
          if (!written.some((w) => w.partition === partition))
            throw new Error(`send to partition ${partition} resolved without writing it`);
        }),
      );
      await sleep(100);
    }
  })();
  return { done, produced: () => produced };
}

/** Events of partition `p`: its end offset once everything is produced. */
const shareOf = (p: number) => Math.ceil((TOTAL - p) / PARTITIONS);

/** A group's committed offsets by partition; none: absent. */
async function committed(groupId: string, name: string): Promise<Map<number, number>> {
  const [t] = await cluster.admin.fetchOffsets({ groupId, topics: [name] });
  return new Map(
    (t?.partitions ?? []).filter((p) => Number(p.offset) >= 0).map((p) => [p.partition, Number(p.offset)]),
  );
}

/** The source partition led by the group coordinator of `groupId` if any, else partition 0. */
async function partitionToKill(name: string): Promise<{ partition: number; alsoCoordinator: boolean }> {
  const coordinator = await cluster.leaderOf('__consumer_offsets', 0);
  for (let p = 0; p < PARTITIONS; p++)
    if ((await cluster.leaderOf(name, p)) === coordinator) return { partition: p, alsoCoordinator: true };
  return { partition: 0, alsoCoordinator: false };
}

const consumerConfig: NonNullable<KafkaBridgeOptions<DockRow>['consumerConfig']> = {
  sessionTimeout: 10_000,
  rebalanceTimeout: 20_000,
  heartbeatInterval: 500,
  maxWaitTimeInMs: 100,
};

/** The sink retries without giving up into the dead letter while brokers move. */
const patientRetry = {
  maxAttempts: Number.POSITIVE_INFINITY,
  baseDelayMs: 200,
  maxDelayMs: 2000,
  maxElapsedMs: 150_000,
};

/**
 * A bridge from `topic` into `sink` that skips what `store` holds and reports its errors into
 * `errors`: short group timers, commits every 200 ms, undecodable messages into `deadLetterFile`.
 */
function eosBridge(
  groupId: string,
  topic: string,
  sink: Sink<DockRow>,
  store: NonNullable<KafkaBridgeOptions<DockRow>['offsetStores']>[number]['store'],
  deadLetterFile: string,
  errors: string[],
): KafkaBridge<DockRow> {
  const bridge = new KafkaBridge<DockRow>({
    kafka,
    groupId,
    consumerConfig,
    topics: [topic],
    fromBeginning: true,
    decode: decodeDockEvent,
    route: () => sink,
    deadLetter: fileDeadLetter(join(dir, deadLetterFile)),
    commitIntervalMs: 200,
    offsetStores: [{ sink, store }],
  });
  bridge.on('error', ({ error, fatal }) =>
    errors.push(`${fatal ? 'fatal' : 'non-fatal'}: ${(error as Error).message}`),
  );
  return bridge;
}

describe('exactly-once on a three-broker cluster when a leader is killed with -9', () => {
  it('the bridge into PostgreSQL with stored offsets loses nothing, writes no row twice, and resumes by itself when the leader of a source partition dies', async () => {
    const name = await topic('eos_failover_pg', PARTITIONS);
    const groupId = uniqueName('eos_failover_pg');
    const table = uniqueName('dock_eos_failover');
    await createDockTable(schema.pool, table, 'insert');
    const adapter = pgRowsAdapter(schema.pool, table, 'insert', { storeOffsetsFor: groupId });
    const rows = new Sink<DockRow>(adapter, {
      name: 'dock-status',
      maxRecords: 500,
      maxAgeMs: 100,
      retry: patientRetry,
    });
    const errors: string[] = [];
    const bridge = eosBridge(
      groupId,
      name,
      rows,
      { storedOffsets: adapter.storedOffsets!.bind(adapter) },
      'pg-undecodable.ndjson',
      errors,
    );
    const producer = kafka.producer({ idempotent: true, allowAutoTopicCreation: false });
    await producer.connect();
    const stored = async () => {
      const { rows: r } = await schema.pool.query<{ kpartition: number; next_offset: string }>(
        'SELECT kpartition, next_offset FROM spillway_offsets WHERE consumer_group = $1',
        [groupId],
      );
      return new Map(r.map((x) => [x.kpartition, Number(x.next_offset)]));
    };
    const count = async () =>
      (
        await schema.pool.query<{ rows: string; offsets: string; seqs: string }>(
          `SELECT count(*) AS rows, count(DISTINCT (kpartition, koffset)) AS offsets, count(DISTINCT seq) AS seqs FROM ${table}`,
        )
      ).rows[0]!;
    await bridge.start();
    try {
      const feed = produceSlowly(producer, name);
      await waitFor(
        'rows to flow',
        async () => (Number((await count()).rows) >= TOTAL / 4 ? true : undefined),
        {
          timeoutMs: 120_000,
          intervalMs: 50,
        },
      );
      const { partition, alsoCoordinator } = await partitionToKill(name);
      const rowsAtKill = Number((await count()).rows);
      const lastAtKill = Number(
        (
          await schema.pool.query<{ last: string | null }>(
            `SELECT max(koffset) AS last FROM ${table} WHERE kpartition = $1`,
            [partition],
          )
        ).rows[0]!.last ?? -1,
      );
      const victim = await cluster.killLeaderOf(name, partition);
      const newLeader = await cluster.waitForNewLeader(name, partition, victim);
      await feed.done;
      await waitFor(
        'the stored offsets at the end of every partition',
        async () => {
          const s = await stored();
          return [...Array(PARTITIONS).keys()].every((p) => s.get(p) === shareOf(p)) ? true : undefined;
        },
        { timeoutMs: 150_000 },
      ).catch((error: unknown) => {
        const { partitions, ...counts } = bridge.snapshot();
        throw new Error(
          `${(error as Error).message}; bridge ${JSON.stringify(counts)} ${JSON.stringify(partitions)}; errors ${errors.join(' | ')}`,
        );
      });
      const n = await count();
      const afterKill = Number(
        (
          await schema.pool.query<{ n: string }>(
            `SELECT count(*) AS n FROM ${table} WHERE kpartition = $1 AND koffset > $2`,
            [partition, lastAtKill],
          )
        ).rows[0]!.n,
      );
      console.log(
        `[cluster eos] bridge into PostgreSQL: killed node ${victim.nodeId} (leader of partition ${partition}${alsoCoordinator ? ' and the group coordinator' : ''}) ` +
          `after ${rowsAtKill} rows, new leader ${newLeader.nodeId}; rows ${n.rows}, distinct offsets ${n.offsets}, distinct events ${n.seqs}; ` +
          `${afterKill} rows of that partition past its last row at the kill; sink retries ${rows.snapshot().retries}; ` +
          `non-fatal errors ${errors.length}`,
      );
      expect(victim.running).toBe(false);
      expect(errors.filter((e) => e.startsWith('fatal'))).toEqual([]);
      // Resumed by itself: the killed leader's partition went on past where it stood at the kill.
      expect(afterKill).toBeGreaterThan(0);
      // Nothing lost, nothing twice (an insert table: no key would hide a copy).
      expect(Number(n.seqs)).toBe(TOTAL);
      expect(Number(n.offsets)).toBe(TOTAL);
      expect(Number(n.rows)).toBe(TOTAL);
    } finally {
      await bridge.stop({ timeoutMs: 15_000 }).catch(() => undefined);
      await rows.close().catch(() => undefined);
      await producer.disconnect().catch(() => undefined);
    }
  });

  it('the bridge into the transactional Kafka sink: a read_committed consumer sees every message once when the leader of an output partition dies mid-stream', async () => {
    const input = await topic('eos_failover_in', PARTITIONS);
    const output = await topic('eos_failover_out', PARTITIONS);
    const groupId = uniqueName('eos_failover_k2k');
    const prefix = uniqueName('txn');
    const adapter = kafkaTransactionalAdapter<DockRow>({
      kafka,
      group: groupId,
      transactionalIdPrefix: prefix,
      topic: output,
      mapper: (row) => ({ key: row.dock, value: JSON.stringify(row) }),
      producer: { retry: { retries: 10, initialRetryTime: 100, maxRetryTime: 3000 } },
    });
    const sink = new Sink<DockRow>(adapter, {
      name: 'enriched',
      maxRecords: 1000,
      maxAgeMs: 100,
      retry: patientRetry,
    });
    const errors: string[] = [];
    const bridge = eosBridge(groupId, input, sink, adapter, 'k2k-undecodable.ndjson', errors);
    const producer = kafka.producer({ idempotent: true, allowAutoTopicCreation: false });
    await producer.connect();
    const offsetsGroup = `${prefix}-${groupId}`;
    const storedTotal = async () =>
      [...(await committed(offsetsGroup, input)).values()].reduce((a, b) => a + b, 0);
    await bridge.start();
    try {
      const feed = produceSlowly(producer, input);
      await waitFor(
        'transactions to commit',
        async () => ((await storedTotal()) >= TOTAL / 4 ? true : undefined),
        {
          timeoutMs: 120_000,
          intervalMs: 50,
        },
      );
      const storedAtKill = await storedTotal();
      const victim = await cluster.killLeaderOf(output, 0);
      const newLeader = await cluster.waitForNewLeader(output, 0, victim);
      await feed.done;
      await waitFor(
        'the stored offsets at the end of every input partition',
        async () => {
          const s = await committed(offsetsGroup, input);
          return [...Array(PARTITIONS).keys()].every((p) => s.get(p) === shareOf(p)) ? true : undefined;
        },
        { timeoutMs: 150_000 },
      ).catch((error: unknown) => {
        throw new Error(
          `${(error as Error).message}; sink ${JSON.stringify(adapter.stats())}; errors ${errors.join(' | ')}`,
        );
      });
      await bridge.stop({ timeoutMs: 15_000 });
      await sink.close();

      // Source: Apache Kafka documentation, Message Delivery Semantics and isolation.level: a
      // read_committed consumer (kafkajs' default) sees each message of a committed transaction
      // once and none of an aborted one.
      // The Apache Kafka Java client reads it: the reference for read_committed. kafkajs 2.2.4's
      // reader is logged beside it (see read-topic.ts for why it is not the check).
      const seqs = (await readTopicJava(cluster.brokers, output)).map((v) => (JSON.parse(v) as DockRow).seq);
      const byKafkajs = (await readTopic(kafka, output)).length;
      const distinct = new Set(seqs);
      const s = adapter.stats();
      console.log(
        `[cluster eos] bridge into the transactional sink: killed node ${victim.nodeId} (leader of output partition 0) after ${storedAtKill} offsets stored, ` +
          `new leader ${newLeader.nodeId}; ${seqs.length} messages read committed, ${distinct.size} distinct (kafkajs' reader: ${byKafkajs}); sink ${JSON.stringify(s)}, ` +
          `retries ${sink.snapshot().retries}; non-fatal errors ${errors.length}${errors.length > 0 ? ` (${errors.slice(0, 3).join(' | ')})` : ''}`,
      );
      expect(victim.running).toBe(false);
      expect(errors.filter((e) => e.startsWith('fatal'))).toEqual([]);
      // Nothing lost, nothing twice. Before the sink read stored offsets with require_stable, 1 of
      // 4 runs read back 105 copies: a transaction whose outcome was lost with the broker, settled
      // after a new fence by offsets read from before it.
      expect(distinct.size).toBe(TOTAL);
      expect(seqs.length).toBe(TOTAL);
      expect(Math.min(...distinct)).toBe(0);
      expect(Math.max(...distinct)).toBe(TOTAL - 1);
    } finally {
      await bridge.stop({ timeoutMs: 15_000 }).catch(() => undefined);
      await sink.close().catch(() => undefined);
      await producer.disconnect().catch(() => undefined);
    }
  });
});
