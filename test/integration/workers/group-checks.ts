// What the bridge process tests check from outside the consumer processes: dock events produced
// to a topic, the group's committed offsets, and the rows of a dock table.
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import type { Producer } from 'kafkajs';
import { afterAll, beforeAll } from 'vitest';
import {
  sleep,
  type TestKafka,
  type TestSchema,
  waitFor,
  withKafka,
  withSchema,
} from '../../harness/index.js';
import { dockEvent, encodeEvent } from './dock-rows.js';

export interface RowCounts {
  rows: number;
  distinct: number;
  min: number;
  max: number;
}

export function groupChecks(kafka: TestKafka, schema: TestSchema, producer: Producer) {
  /** The group's committed offsets (next offset to read) by partition; -1 when none. */
  async function committed(groupId: string, topic: string): Promise<Map<number, number>> {
    const [t] = await kafka.admin.fetchOffsets({ groupId, topics: [topic] });
    return new Map((t?.partitions ?? []).map((p) => [p.partition, Number(p.offset)]));
  }

  async function endOffsets(topic: string): Promise<Map<number, number>> {
    const offsets = await kafka.admin.fetchTopicOffsets(topic);
    return new Map(offsets.map((o) => [o.partition, Number(o.high)]));
  }

  return {
    committed,
    endOffsets,

    /** Sends dock events `from` … `to - 1`, event `seq` to partition `seq % partitions`. */
    async produce(topic: string, partitions: number, from: number, to: number, chunk = 5000): Promise<void> {
      for (let start = from; start < to; start += chunk) {
        const end = Math.min(to, start + chunk);
        const messages = [];
        for (let seq = start; seq < end; seq++)
          messages.push({ partition: seq % partitions, value: encodeEvent(dockEvent(seq)) });
        await producer.send({ topic, acks: -1, messages });
      }
    },

    /**
     * A steady producer: `perTick` dock events every 100 ms, numbered from 0, until `stop()`, which
     * resolves with how many were produced once the last send is done.
     */
    steadyProducer(topic: string, partitions: number, perTick: number) {
      let produced = 0;
      let producing = true;
      const loop = (async () => {
        while (producing) {
          await this.produce(topic, partitions, produced, produced + perTick);
          produced += perTick;
          await sleep(100);
        }
      })();
      return {
        async stop(): Promise<number> {
          producing = false;
          await loop;
          return produced;
        },
        /** Stops without waiting, for a test's `finally`. */
        abandon(): Promise<void> {
          producing = false;
          return loop.catch(() => undefined);
        },
      };
    },

    /** Messages in the topic: the sum of its partitions' end offsets (nothing is deleted here). */
    async topicSize(topic: string): Promise<number> {
      return [...(await endOffsets(topic)).values()].reduce((a, b) => a + b, 0);
    },

    /** The sum over partitions of the group's committed offsets (none counts 0). */
    async committedTotal(groupId: string, topic: string): Promise<number> {
      return [...(await committed(groupId, topic)).values()].reduce((a, b) => a + Math.max(0, b), 0);
    },

    /** Waits until the group has committed every partition's end offset. */
    async waitCommittedToEnd(groupId: string, topic: string, timeoutMs = 120_000): Promise<void> {
      const ends = await endOffsets(topic);
      await waitFor(
        `group ${groupId} to commit the end of ${topic}`,
        async () => {
          const c = await committed(groupId, topic);
          return [...ends].every(([p, end]) => c.get(p) === end) ? true : undefined;
        },
        { timeoutMs, intervalMs: 250 },
      );
    },

    /**
     * Waits until the server has ended every session of a killed worker (its `application_name`
     * is the worker's label): a transaction it had fully received may still commit until then.
     */
    async sessionsGone(label: string): Promise<void> {
      await waitFor(
        `the sessions of ${label} to end`,
        async () => {
          const { rows } = await schema.pool.query<{ n: string }>(
            'SELECT count(*) AS n FROM pg_stat_activity WHERE application_name = $1',
            [label],
          );
          return Number(rows[0]!.n) === 0 ? true : undefined;
        },
        { timeoutMs: 60_000, intervalMs: 50 },
      );
    },

    /** Rows, distinct `seq` values, and the smallest and largest `seq` of a dock table. */
    async counts(table: string): Promise<RowCounts> {
      const { rows } = await schema.pool.query<{
        rows: string;
        distinct: string;
        min: string | null;
        max: string | null;
      }>(
        `SELECT count(*) AS rows, count(DISTINCT seq) AS distinct, min(seq) AS min, max(seq) AS max FROM ${table}`,
      );
      const r = rows[0]!;
      return {
        rows: Number(r.rows),
        distinct: Number(r.distinct),
        min: Number(r.min ?? -1),
        max: Number(r.max ?? -1),
      };
    },
  };
}

/** The servers a bridge process test file shares: set up in beforeAll, dropped in afterAll. */
export interface GroupFixture {
  kafka: TestKafka;
  schema: TestSchema;
  producer: Producer;
  /** A temporary directory for the workers' dead-letter files. */
  dir: string;
  checks: ReturnType<typeof groupChecks>;
}

/** Registers this file's beforeAll / afterAll; the returned object is filled in beforeAll. */
export function groupFixture(schemaPrefix: string): GroupFixture {
  const f = {} as GroupFixture;
  beforeAll(async () => {
    [f.kafka, f.schema] = await Promise.all([withKafka(), withSchema(schemaPrefix)]);
    // Idempotent, so a retried send under load cannot put an event in the topic twice: the
    // duplicates the tests count are then the bridge's alone.
    f.producer = f.kafka.kafka.producer({ allowAutoTopicCreation: false, idempotent: true });
    await f.producer.connect();
    f.dir = mkdtempSync(join(tmpdir(), `spillway-${schemaPrefix}-`));
    f.checks = groupChecks(f.kafka, f.schema, f.producer);
  });
  afterAll(async () => {
    await f.producer?.disconnect();
    await Promise.all([f.kafka?.drop(), f.schema?.drop()]);
    if (f.dir) rmSync(f.dir, { recursive: true, force: true });
  });
  return f;
}
