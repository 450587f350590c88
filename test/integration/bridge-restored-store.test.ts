// The README's caution on exactly-once into PostgreSQL when the table is restored from a backup,
// against the real broker and server: the bridge skips what the stored offsets say the table holds,
// but never goes back to them. A table and its progress rows restored to an earlier point therefore
// miss the messages between the restored offsets and the group's committed ones unless the group's
// Kafka offsets are set to the stored ones first, which the README's remedy does (the adapter's
// storedOffsets(), then kafkajs' admin.setOffsets() with the group stopped: the kafkajs documentation,
// Admin client, says setOffsets needs a group with no running consumers; from memory).
import { join } from 'node:path';
import { fileDeadLetter, Sink } from '@spillway/core';
import { KafkaBridge } from '@spillway/kafka';
import { describe, expect, it } from 'vitest';
import { uniqueName, waitFor } from '../harness/index.js';
import { createDockTable, type DockRow, decodeDockEvent, pgRowsAdapter } from './workers/dock-rows.js';
import { groupFixture } from './workers/group-checks.js';

const PARTITIONS = 2;
/** Messages before the backup, after it, and after the restore. */
const BEFORE = 1000;
const AFTER = 1000;
const LATER = 100;

// Short group timers: a join takes about a second instead of the 3-5 s defaults.
const consumerConfig = {
  sessionTimeout: 10_000,
  rebalanceTimeout: 20_000,
  heartbeatInterval: 500,
  maxWaitTimeInMs: 100,
};

describe('exactly-once into PostgreSQL, the table restored from a backup', () => {
  const f = groupFixture('eos_restore');

  /** A bridge with stored offsets into `table`; `stop()` stops it and closes its sink. */
  async function startBridge(topic: string, groupId: string, table: string) {
    const adapter = pgRowsAdapter(f.schema.pool, table, 'insert', { storeOffsetsFor: groupId });
    const sink = new Sink<DockRow>(adapter, { name: 'dock-status', maxRecords: 200, maxAgeMs: 100 });
    const bridge = new KafkaBridge<DockRow>({
      kafka: f.kafka.kafka,
      groupId,
      consumerConfig,
      topics: [topic],
      fromBeginning: true,
      decode: decodeDockEvent,
      route: () => sink,
      deadLetter: fileDeadLetter(join(f.dir, `${groupId}.ndjson`)),
      commitIntervalMs: 200,
      offsetStores: [{ sink, store: { storedOffsets: adapter.storedOffsets!.bind(adapter) } }],
    });
    await bridge.start();
    return {
      async stop() {
        await bridge.stop({ timeoutMs: 20_000 });
        await sink.close();
      },
    };
  }

  async function rowsAtLeast(table: string, n: number): Promise<void> {
    await waitFor(
      `${n} rows in ${table}`,
      async () => ((await f.checks.counts(table)).rows >= n ? true : undefined),
      { timeoutMs: 60_000, intervalMs: 100 },
    );
  }

  /**
   * Streams BEFORE messages, backs the table and the group's progress rows up, streams AFTER more,
   * stops the bridge, and restores both from the backup: the store is back where it was after
   * BEFORE messages, while the group's committed Kafka offsets are at the end of the topic.
   */
  async function restoredStore(prefix: string) {
    const topic = await f.kafka.topic(PARTITIONS, prefix);
    const groupId = uniqueName(prefix);
    const table = uniqueName(prefix);
    await createDockTable(f.schema.pool, table, 'insert');
    const first = await startBridge(topic, groupId, table);
    await f.checks.produce(topic, PARTITIONS, 0, BEFORE);
    await rowsAtLeast(table, BEFORE);
    await f.checks.waitCommittedToEnd(groupId, topic);
    const q = (sql: string) => f.schema.pool.query(sql);
    await q(`CREATE TABLE ${table}_backup AS SELECT * FROM ${table}`);
    await q(
      `CREATE TABLE ${table}_progress_backup AS SELECT * FROM spillway_offsets WHERE consumer_group = '${groupId}'`,
    );
    await f.checks.produce(topic, PARTITIONS, BEFORE, BEFORE + AFTER);
    await rowsAtLeast(table, BEFORE + AFTER);
    await f.checks.waitCommittedToEnd(groupId, topic);
    await first.stop();
    // The restore: the table and its progress rows as they were at the backup.
    await q(`DELETE FROM ${table}`);
    await q(`INSERT INTO ${table} SELECT * FROM ${table}_backup`);
    await q(`DELETE FROM spillway_offsets WHERE consumer_group = '${groupId}'`);
    await q(`INSERT INTO spillway_offsets SELECT * FROM ${table}_progress_backup`);
    expect(await f.checks.counts(table)).toMatchObject({ rows: BEFORE, distinct: BEFORE, max: BEFORE - 1 });
    return { topic, groupId, table };
  }

  it('started as it is, the bridge resumes at the group committed offsets: the messages after the backup stay missing', async () => {
    const { topic, groupId, table } = await restoredStore('eos_restore_as_is');
    const bridge = await startBridge(topic, groupId, table);
    try {
      await f.checks.produce(topic, PARTITIONS, BEFORE + AFTER, BEFORE + AFTER + LATER);
      await rowsAtLeast(table, BEFORE + LATER);
      await f.checks.waitCommittedToEnd(groupId, topic);
    } finally {
      await bridge.stop();
    }
    // Everything before the backup and after the restore, none of the AFTER messages in between.
    expect(await f.checks.counts(table)).toEqual({
      rows: BEFORE + LATER,
      distinct: BEFORE + LATER,
      min: 0,
      max: BEFORE + AFTER + LATER - 1,
    });
    const { rows } = await f.schema.pool.query<{ n: string }>(
      `SELECT count(*) AS n FROM ${table} WHERE seq >= ${BEFORE} AND seq < ${BEFORE + AFTER}`,
    );
    expect(Number(rows[0]!.n)).toBe(0);
  });

  it('with the group offsets set to the stored ones first, as the README says, every message is in the table exactly once', async () => {
    const { topic, groupId, table } = await restoredStore('eos_restore_reset');
    // The README's remedy, with the group stopped: the stored offsets, read through the adapter,
    // become the group's committed Kafka offsets.
    const reader = pgRowsAdapter(f.schema.pool, table, 'insert', { storeOffsetsFor: groupId });
    const partitions = Array.from({ length: PARTITIONS }, (_, partition) => ({ topic, partition }));
    const stored = await reader.storedOffsets!(groupId, partitions);
    expect(stored).toHaveLength(PARTITIONS);
    // Each partition's stored offset is where the backup left it, below the group's committed one.
    const committed = await f.checks.committed(groupId, topic);
    for (const o of stored) expect(Number(o.offset)).toBeLessThan(committed.get(o.partition)!);
    await f.kafka.admin.setOffsets({
      groupId,
      topic,
      partitions: stored.map((o) => ({ partition: o.partition, offset: o.offset })),
    });
    const bridge = await startBridge(topic, groupId, table);
    try {
      await f.checks.produce(topic, PARTITIONS, BEFORE + AFTER, BEFORE + AFTER + LATER);
      await rowsAtLeast(table, BEFORE + AFTER + LATER);
      await f.checks.waitCommittedToEnd(groupId, topic);
    } finally {
      await bridge.stop();
    }
    expect(await f.checks.counts(table)).toEqual({
      rows: BEFORE + AFTER + LATER,
      distinct: BEFORE + AFTER + LATER,
      min: 0,
      max: BEFORE + AFTER + LATER - 1,
    });
  });
});
