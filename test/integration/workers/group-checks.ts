// What the bridge process tests check from outside the consumer processes: dock events produced
// to a topic, the group's committed offsets, and the rows of a dock table.
import type { Producer } from 'kafkajs';
import { type TestKafka, type TestSchema, waitFor } from '../../harness/index.js';
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
