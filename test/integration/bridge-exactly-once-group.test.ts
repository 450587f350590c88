// Exactly-once from Kafka into PostgreSQL in a group of three consumer processes
// (workers/bridge-worker.ts with `exactlyOnce`, insert mode: an append-only table with no key to
// deduplicate on). While a producer keeps writing, one member is killed with SIGKILL and another
// stopped with SIGTERM; the partitions move twice, and the table must end with every message once.
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { services, uniqueName, waitFor } from '../harness/index.js';
import type { WorkerConfig } from './workers/bridge-worker.js';
import { createDockTable } from './workers/dock-rows.js';
import { groupFixture } from './workers/group-checks.js';
import { messagesTaken, ownsSplit, startWorker, type Worker } from './workers/spawn.js';

const PARTITIONS = 6;

const f = groupFixture('bridge_eos_group');

function config(label: string, topic: string, groupId: string, table: string): WorkerConfig {
  return {
    label,
    brokers: services().kafkaBrokers,
    topic,
    groupId,
    pgUrl: `${services().pgUrl}?options=${encodeURIComponent(`-c search_path=${f.schema.schema}`)}`,
    tables: [{ table, mode: 'insert' }],
    deadLetterPath: join(f.dir, `${label}.dead-letter.ndjson`),
    exactlyOnce: true,
    // A long commit tick: the kill always finds rows stored but not committed in Kafka.
    commitIntervalMs: 3000,
  };
}

function lastStats(w: Worker): Record<string, unknown> {
  return w.lines.filter((l) => l.event === 'stats').at(-1) ?? {};
}

describe('exactly-once in a consumer group', () => {
  it('a group of 3 processes, one killed with -9 and one stopped with SIGTERM while a producer keeps writing: every message once in the table', async () => {
    const topic = await f.kafka.topic(PARTITIONS, 'eos_group');
    const groupId = uniqueName('eos_group');
    const table = uniqueName('eos_group');
    await createDockTable(f.schema.pool, table, 'insert');

    // A steady producer: 300 messages every 100 ms until told to stop.
    const producer = f.checks.steadyProducer(topic, PARTITIONS, 300);
    const owns = (ws: Worker[], sizes: number[]) => ownsSplit(ws, PARTITIONS, sizes);
    const workers: Worker[] = [];
    try {
      const [a, b, c] = ['eosg_a', 'eosg_b', 'eosg_c'].map((label) =>
        startWorker(config(label, topic, groupId, table)),
      ) as [Worker, Worker, Worker];
      workers.push(a, b, c);
      await waitFor('3 members with 2 partitions each', () => owns([a, b, c], [2, 2, 2]), {
        timeoutMs: 90_000,
        intervalMs: 100,
      });
      await waitFor(
        'every member to take messages',
        () => (workers.every((w) => messagesTaken(w) > 500) ? true : undefined),
        { timeoutMs: 60_000 },
      );

      // kill -9: C's partitions move once the broker expires its session.
      c.child.kill('SIGKILL');
      const cExit = await c.exited;
      await f.checks.sessionsGone(c.label);
      await waitFor('2 members with 3 partitions each', () => owns([a, b], [3, 3]), {
        timeoutMs: 90_000,
        intervalMs: 100,
      });
      const taken = messagesTaken(a) + messagesTaken(b);
      await waitFor(
        'A and B to take more messages after the kill',
        () => (messagesTaken(a) + messagesTaken(b) > taken + 1000 ? true : undefined),
        { timeoutMs: 60_000 },
      );

      // SIGTERM: B flushes, commits and leaves; A takes everything.
      b.child.kill('SIGTERM');
      const bExit = await b.exited;
      await waitFor('A to own all 6 partitions', () => owns([a], [6]), {
        timeoutMs: 90_000,
        intervalMs: 100,
      });
      const aTaken = messagesTaken(a);
      await waitFor('A to take more messages', () => (messagesTaken(a) > aTaken + 1000 ? true : undefined), {
        timeoutMs: 60_000,
      });

      const produced = await producer.stop();
      await f.checks.waitCommittedToEnd(groupId, topic);
      a.child.kill('SIGTERM');
      const aExit = await a.exited;
      const final = await f.checks.counts(table);
      const skippedStored = workers.reduce((n, w) => n + Number(lastStats(w).skippedStored ?? 0), 0);
      console.log(
        `[exactly-once] group of 3: produced ${produced}; table ${final.rows} rows, ${final.distinct} distinct; ` +
          `messages skipped as stored after the moves ${skippedStored}; taken ${workers.map((w) => `${w.label} ${messagesTaken(w)}`).join(', ')}`,
      );
      expect(cExit.signal).toBe('SIGKILL');
      // Source: shell convention, exit status 128 + signal number (SIGTERM = 15).
      expect([bExit.code, aExit.code]).toEqual([143, 143]);
      expect(await f.checks.topicSize(topic)).toBe(produced); // each event is in the topic once
      expect(final).toEqual({ rows: produced, distinct: produced, min: 0, max: produced - 1 });
    } finally {
      await producer.abandon();
      for (const w of workers)
        if (w.child.exitCode === null && w.child.signalCode === null) w.child.kill('SIGKILL');
    }
  });
});
