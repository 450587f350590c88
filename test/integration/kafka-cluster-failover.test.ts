// Leader failover on a three-broker cluster (replication 3, min.insync.replicas 2), for the
// at-least-once paths that exist today: the producer sink writing while the leader of its
// partition is killed with -9, and the consumer bridge into PostgreSQL while the leader of a
// source partition is killed with -9. The killed broker stays down until the stream has finished:
// the clients must find the new leader by themselves.
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { type DeadLetter, type DeadLetterTarget, fileDeadLetter, Sink } from '@spillway/core';
import { KafkaBridge, kafkaProducerAdapter } from '@spillway/kafka';
import { type Kafka, Partitioners } from 'kafkajs';
import { afterAll, beforeAll, beforeEach, describe, expect, it } from 'vitest';
import {
  type KafkaCluster,
  type KafkaClusterNode,
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

let cluster: KafkaCluster;
let kafka: Kafka;
let schema: TestSchema;
let dir: string;
const topics: string[] = [];

beforeAll(async () => {
  [cluster, schema] = await Promise.all([startKafkaCluster(), withSchema('cluster')]);
  const mib = cluster.nodes.map((n) => Math.round((n.residentBytes() ?? 0) / 2 ** 20));
  console.log(
    `[cluster] ${cluster.nodes.length} nodes ready in ${cluster.startMs} ms; resident MiB per node ${mib.join('/')}`,
  );
  // Client retries spread over ~30 s, longer than a leader election after a kill (a few seconds).
  kafka = kafkaClient({ retry: { retries: 10, initialRetryTime: 200, maxRetryTime: 5000 } }, cluster.brokers);
  dir = mkdtempSync(join(tmpdir(), 'spillway-cluster-'));
});

afterAll(async () => {
  await cluster?.stop();
  await schema?.drop();
  if (dir) rmSync(dir, { recursive: true, force: true });
});

// Each test starts from a whole cluster: bring back whatever the last one killed.
beforeEach(async () => {
  await Promise.all(cluster.nodes.filter((n) => !n.running).map((n) => n.restart()));
  await cluster.waitForFullIsr(topics);
});

async function topic(prefix: string, partitions: number): Promise<string> {
  const name = await cluster.createTopic(uniqueTopic(prefix), partitions);
  topics.push(name);
  return name;
}

class CollectedDeadLetters<T> implements DeadLetterTarget<T> {
  readonly letters: DeadLetter<T>[] = [];
  async write(letters: readonly DeadLetter<T>[]): Promise<void> {
    this.letters.push(...letters);
  }
}

/** Every message now in `topic` (up to its high watermarks), read by a fresh consumer group. */
async function readAll(
  topicName: string,
): Promise<Array<{ partition: number; offset: number; value: string }>> {
  const admin = kafka.admin();
  await admin.connect();
  const ends = await admin.fetchTopicOffsets(topicName);
  await admin.disconnect();
  const total = ends.reduce((n, p) => n + Number(p.high) - Number(p.low), 0);
  const out: Array<{ partition: number; offset: number; value: string }> = [];
  const consumer = kafka.consumer({ groupId: uniqueName('reader'), maxWaitTimeInMs: 200 });
  await consumer.connect();
  await consumer.subscribe({ topic: topicName, fromBeginning: true });
  await consumer.run({
    eachBatch: async ({ batch }) => {
      for (const m of batch.messages)
        out.push({ partition: batch.partition, offset: Number(m.offset), value: m.value?.toString() ?? '' });
    },
  });
  try {
    await waitFor(`all ${total} messages of ${topicName}`, () => (out.length >= total ? true : undefined), {
      timeoutMs: 120_000,
      intervalMs: 100,
    });
  } finally {
    await consumer.disconnect();
  }
  return out;
}

/** A Tandem Bikes dock event as the producer sink sends it. */
interface DockEvent {
  dock: string;
  seq: number;
}

interface ProducerFailover {
  victim: KafkaClusterNode;
  newLeader: KafkaClusterNode;
  written: number;
  read: number;
  missing: number;
  duplicates: number;
  duplicatesPerPartition: number[];
  retries: number;
  deadLetters: number;
  /** Records accepted after the kill that landed on partition 0, led by a surviving broker. */
  afterKillOnPartition0: number;
}

const SINK_RECORDS = 30_000;
const SINK_KILL_AT = 10_000;
const SINK_BATCH = 1000;

/**
 * The producer sink (idempotent, as by default) writes SINK_RECORDS keyed dock events into a new
 * topic; after SINK_KILL_AT of them the leader of partition 0 is killed with -9 while the writes
 * go on. A separate consumer then reads the whole topic.
 */
async function producerFailover(partitions: number): Promise<ProducerFailover> {
  const name = await topic(`failover_sink_p${partitions}`, partitions);
  const deadLetters = new CollectedDeadLetters<DockEvent>();
  const sink = new Sink<DockEvent>(
    kafkaProducerAdapter<DockEvent>({
      kafka,
      topic: name,
      idempotent: true,
      mapper: (e) => ({ key: e.dock, value: JSON.stringify(e) }),
      producer: {
        createPartitioner: Partitioners.DefaultPartitioner,
        retry: { retries: 5, initialRetryTime: 200 },
      },
    }),
    {
      maxRecords: SINK_BATCH,
      deadLetter: deadLetters,
      retry: {
        maxAttempts: Number.POSITIVE_INFINITY,
        baseDelayMs: 200,
        maxDelayMs: 2000,
        maxElapsedMs: 150_000,
      },
    },
  );
  const retryErrors: string[] = [];
  sink.on('retry', ({ error }) => retryErrors.push((error as Error).message));
  const event = (i: number): DockEvent => ({ dock: `dock-${String(i % 97).padStart(3, '0')}`, seq: i });
  const leaderBefore = await cluster.leaderOf(name, 0);
  let killed: Promise<KafkaClusterNode> | undefined;
  for (let i = 0; i < SINK_RECORDS; i++) {
    await sink.write(event(i));
    // Not awaited: the writes go on while the broker dies.
    if (i === SINK_KILL_AT) killed = cluster.killLeaderOf(name, 0);
  }
  const victim = await killed!;
  await sink.close({ timeoutMs: 150_000 });
  const snap = sink.snapshot();
  const newLeader = await cluster.waitForNewLeader(name, 0, victim);
  expect(victim).toBe(leaderBefore);
  expect(victim.running).toBe(false);

  const read = await readAll(name);
  const seen = new Map<number, number>(); // seq → partition
  const duplicatesPerPartition = new Array<number>(partitions).fill(0);
  for (const m of read) {
    const e = JSON.parse(m.value) as DockEvent;
    if (seen.has(e.seq)) duplicatesPerPartition[m.partition]!++;
    else seen.set(e.seq, m.partition);
  }
  const result: ProducerFailover = {
    victim,
    newLeader,
    written: snap.written,
    read: read.length,
    missing: SINK_RECORDS - seen.size,
    duplicates: read.length - seen.size,
    duplicatesPerPartition,
    retries: snap.retries,
    deadLetters: deadLetters.letters.length,
    afterKillOnPartition0: [...seen].filter(([seq, p]) => p === 0 && seq > SINK_KILL_AT).length,
  };
  console.log(
    `[cluster] producer sink, ${partitions} partition(s): killed node ${victim.nodeId} (leader of partition 0), new leader ${newLeader.nodeId}; ` +
      `${result.written} written, ${result.read} read, ${seen.size} unique, ${result.duplicates} duplicates ` +
      `(per partition ${duplicatesPerPartition.join('/')}), ${result.missing} missing; ${result.retries} sink retries` +
      `${retryErrors.length > 0 ? ` (${retryErrors.join(' | ')})` : ''}; ${result.afterKillOnPartition0} records landed on partition 0 after the kill`,
  );
  return result;
}

describe('the Kafka producer sink on a three-broker cluster', () => {
  it('writes every record exactly once when the leader of its partition is killed with -9 mid-stream, and carries on without the killed broker', async () => {
    const r = await producerFailover(1);
    expect(r.deadLetters).toBe(0);
    expect(r.written).toBe(SINK_RECORDS);
    expect(r.missing).toBe(0);
    // Idempotent producer: a request retried after the leader died is not appended twice.
    expect(r.duplicates).toBe(0);
    expect(r.afterKillOnPartition0).toBeGreaterThan(0);
  });

  // kafkajs 2.2.4 resends a failed produce request only to brokers that have not answered the
  // same sendBatch call (producer/sendMessages.js). When the dead leader's partition moves to a
  // broker that already answered, sendBatch resolves without having written that partition's
  // records (370 of 30,000 missing in 1 run of 3, before the adapter checked every partition
  // against the produce response). The adapter now reports those records as not written.
  it('loses no record when the leader of one of three partitions is killed with -9 mid-stream, and writes duplicates only for records of batches it retried', async () => {
    const r = await producerFailover(3);
    expect(r.deadLetters).toBe(0);
    expect(r.written).toBe(SINK_RECORDS);
    expect(r.missing).toBe(0);
    expect(r.afterKillOnPartition0).toBeGreaterThan(0);
    // At least once, not exactly once, on the surviving partitions: kafkajs 2.2.4 retries a
    // sendBatch after the first failed broker request while the other brokers' requests are still
    // in flight, and sends those again with new sequence numbers (producer/sendMessages.js: a
    // broker without a response yet is resent), so the broker appends them twice (627 copies with
    // 0 sink retries in one run). And when the request to the dead leader fails past kafkajs' own
    // retries, the engine retries the whole batch. Each of these copies at most one batch: the
    // one in flight at the kill, and each batch the sink retried.
    expect(r.duplicates).toBeLessThanOrEqual((r.retries + 1) * SINK_BATCH);
    // The dead leader's own partition is retried with the same sequence numbers: no copy there.
    expect(r.duplicatesPerPartition[0]).toBe(0);
  });
});

describe('the consumer bridge into PostgreSQL on a three-broker cluster', () => {
  it('loses nothing, never commits past rows PostgreSQL has not acknowledged, and resumes by itself when the leader of a source partition is killed with -9', async () => {
    const PARTITIONS = 3;
    const TOTAL = 30_000;
    const name = await topic('failover_bridge', PARTITIONS);
    const groupId = uniqueName('failover_bridge');
    const table = uniqueName('dock_failover');
    await createDockTable(schema.pool, table, 'insert');

    // What PostgreSQL acknowledged, per partition, as the adapter saw it.
    const acked = Array.from({ length: PARTITIONS }, () => new Set<number>());
    let ackedTotal = 0;
    const rows = new Sink<DockRow>(
      pgRowsAdapter(schema.pool, table, 'insert', {
        onDurable: (batch) => {
          for (const r of batch) acked[r.partition]!.add(Number(r.offset));
          ackedTotal += batch.length;
        },
      }),
      { name: 'dock-status', maxRecords: 500, maxAgeMs: 100 },
    );
    const bridge = new KafkaBridge<DockRow>({
      kafka,
      groupId,
      // Short group timers: a join takes about a second instead of the 3-5 s defaults.
      consumerConfig: {
        sessionTimeout: 10_000,
        rebalanceTimeout: 20_000,
        heartbeatInterval: 500,
        maxWaitTimeInMs: 100,
      },
      topics: [name],
      fromBeginning: true,
      decode: decodeDockEvent,
      route: () => rows,
      deadLetter: fileDeadLetter(join(dir, 'undecodable.ndjson')),
      commitIntervalMs: 100,
    });
    // Every commit is checked as it happens: each offset below it must have been acknowledged.
    const checkedUpTo = new Array<number>(PARTITIONS).fill(0);
    const violations: string[] = [];
    const errors: string[] = [];
    let commitsAfterKill = 0;
    let killedAt: number | undefined;
    bridge.on('error', ({ error, fatal }) =>
      errors.push(`${fatal ? 'fatal' : 'non-fatal'}: ${(error as Error).message}`),
    );
    bridge.on('commit', ({ offsets }) => {
      if (killedAt !== undefined) commitsAfterKill++;
      for (const { partition, offset } of offsets) {
        for (let o = checkedUpTo[partition]!; o < Number(offset); o++)
          if (!acked[partition]!.has(o)) violations.push(`${partition}:${o}`);
        checkedUpTo[partition] = Math.max(checkedUpTo[partition]!, Number(offset));
      }
    });

    // The upstream service: an idempotent producer, so that the topic itself holds no duplicates.
    const producer = kafka.producer({ idempotent: true, allowAutoTopicCreation: false });
    await producer.connect();
    const admin = kafka.admin();
    await admin.connect();
    const committed = async () => {
      const [t] = await admin.fetchOffsets({ groupId, topics: [name] });
      return new Map((t?.partitions ?? []).map((p) => [p.partition, Number(p.offset)]));
    };

    // Per source partition: rows, distinct events, and events of another partition's share.
    const tableByPartition = async () =>
      (
        await schema.pool.query(
          `SELECT kpartition, count(*) AS rows, count(DISTINCT seq) AS seqs, count(*) FILTER (WHERE seq % ${PARTITIONS} <> kpartition) AS foreign, max(koffset) AS last FROM ${table} GROUP BY kpartition ORDER BY kpartition`,
        )
      ).rows;

    await bridge.start();
    let produced = 0;
    try {
      // One send per partition: kafkajs 2.2.4 resends a failed request only to brokers that have
      // not answered the same call yet (producer/sendMessages.js), so a call spanning partitions
      // whose leader moves to a broker that already answered resolves without having written
      // that partition's messages. Seen here as 167 (500 / 3) events missing from the topic.
      const producing = (async () => {
        while (produced < TOTAL) {
          const perPartition = Array.from({ length: PARTITIONS }, () => [] as Array<{ value: string }>);
          for (let i = 0; i < 500; i++, produced++)
            perPartition[produced % PARTITIONS]!.push({ value: encodeEvent(dockEvent(produced)) });
          await Promise.all(
            perPartition.map(async (messages, partition) => {
              const written = await producer.send({
                topic: name,
                acks: -1,
                messages: messages.map((m) => ({ ...m, partition })),
              });
              if (!written.some((w) => w.partition === partition))
                throw new Error(`send to partition ${partition} resolved without writing it`);
            }),
          );
          await sleep(20);
        }
      })();
      await waitFor('rows to flow', () => (ackedTotal >= TOTAL / 4 ? true : undefined), {
        timeoutMs: 120_000,
        intervalMs: 20,
      });
      // The harder case: the source partition led by the group's coordinator (the leader of the
      // one group-offsets partition), so that the commits lose their coordinator too.
      const coordinator = await cluster.leaderOf('__consumer_offsets', 0);
      let target = 0;
      for (let p = 0; p < PARTITIONS; p++) if ((await cluster.leaderOf(name, p)) === coordinator) target = p;
      const ackedAtKill = ackedTotal;
      killedAt = Date.now();
      const victim = await cluster.killLeaderOf(name, target);
      const newLeader = await cluster.waitForNewLeader(name, target, victim);
      await producing;
      await waitFor(
        'every partition committed to its end',
        async () => {
          const c = await committed();
          return [...Array(PARTITIONS).keys()].every((p) => c.get(p) === TOTAL / PARTITIONS)
            ? true
            : undefined;
        },
        { timeoutMs: 150_000 },
      ).catch(async (error: unknown) => {
        const { partitions, ...counts } = bridge.snapshot();
        throw new Error(
          `${(error as Error).message}; bridge ${JSON.stringify(counts)} ${JSON.stringify(partitions)}; errors ${errors.join(' | ')}; table ${JSON.stringify(await tableByPartition())}`,
        );
      });
      const [n] = (
        await schema.pool.query<{ rows: string; offsets: string; seqs: string }>(
          `SELECT count(*) AS rows, count(DISTINCT (kpartition, koffset)) AS offsets, count(DISTINCT seq) AS seqs FROM ${table}`,
        )
      ).rows;
      const duplicates = Number(n!.rows) - Number(n!.offsets);
      console.log(
        `[cluster] bridge: killed node ${victim.nodeId} (leader of partition ${target}${victim === coordinator ? ' and the group coordinator' : ''}) ` +
          `after ${ackedAtKill} rows, new leader ${newLeader.nodeId}; ${TOTAL} messages; rows ${n!.rows}, distinct offsets ${n!.offsets}, ` +
          `distinct events ${n!.seqs}; ${duplicates} duplicates; ${commitsAfterKill} commits after the kill; ` +
          `${rows.snapshot().retries} sink retries; non-fatal errors: ${errors.length}`,
      );
      expect(victim.running).toBe(false);
      expect(violations).toEqual([]);
      expect(errors.filter((e) => e.startsWith('fatal'))).toEqual([]);
      expect(commitsAfterKill).toBeGreaterThan(0);
      // Nothing lost: every event is in the table, and the topic held no copy of its own.
      expect(Number(n!.seqs)).toBe(TOTAL);
      expect(Number(n!.offsets)).toBe(TOTAL);
    } finally {
      await bridge.stop({ timeoutMs: 15_000 }).catch(() => undefined);
      await rows.close().catch(() => undefined);
      await producer.disconnect().catch(() => undefined);
      await admin.disconnect().catch(() => undefined);
    }
  });
});
