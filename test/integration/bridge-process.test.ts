// The consumer bridge across process deaths: consumer processes (test/integration/workers/
// bridge-worker.ts) in one group stream dock events from the real broker into PostgreSQL, and the
// test SIGTERMs or SIGKILLs them mid-stream, restarts them and counts every row.
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { services, sleep, uniqueName, waitFor } from '../harness/index.js';
import { createDockTable } from './workers/dock-rows.js';
import { groupFixture } from './workers/group-checks.js';
import { messagesTaken, ownsSplit, startWorker, type Worker } from './workers/spawn.js';

const f = groupFixture('bridge_proc');

function workerConfig(
  label: string,
  topic: string,
  groupId: string,
  tables: Array<{ table: string; mode: 'insert' | 'upsert' }>,
) {
  return {
    label,
    brokers: services().kafkaBrokers,
    topic,
    groupId,
    pgUrl: `${services().pgUrl}?options=${encodeURIComponent(`-c search_path=${f.schema.schema}`)}`,
    tables,
    deadLetterPath: join(f.dir, `${label}.dead-letter.ndjson`),
  };
}

async function stopWorker(w: Worker, signal: 'SIGTERM' | 'SIGKILL') {
  w.child.kill(signal);
  return w.exited;
}

describe('consumer processes of the bridge', () => {
  it('SIGTERM mid-stream flushes and commits, so after a restart the table holds every message exactly once', async () => {
    const TOTAL = 200_000;
    const PARTITIONS = 3;
    const topic = await f.kafka.topic(PARTITIONS, 'dock_term');
    const groupId = uniqueName('bridge_term');
    const table = uniqueName('dock_term');
    await createDockTable(f.schema.pool, table, 'insert');
    const config = workerConfig('term', topic, groupId, [{ table, mode: 'insert' }]);

    const producing = f.checks.produce(topic, PARTITIONS, 0, TOTAL);
    const first = startWorker(config);
    await first.waitFor('ready', (l) => l.event === 'ready');
    await waitFor(
      'the first worker to be mid-stream',
      () => (messagesTaken(first) >= TOTAL / 4 ? true : undefined),
      { timeoutMs: 120_000, intervalMs: 100 },
    );
    const atSignal = messagesTaken(first);
    const exit = await stopWorker(first, 'SIGTERM');
    const afterStop = await f.checks.counts(table);
    const committedAtStop = await f.checks.committedTotal(groupId, topic);
    await producing;

    const second = startWorker({ ...config, label: 'term2' });
    await second.waitFor('ready', (l) => l.event === 'ready');
    await f.checks.waitCommittedToEnd(groupId, topic);
    const exit2 = await stopWorker(second, 'SIGTERM');
    const final = await f.checks.counts(table);
    console.log(
      `[bridge] SIGTERM: first worker took ${atSignal} messages before the signal; at exit the table held ${afterStop.rows} rows and the group had committed ${committedAtStop}; ` +
        `after the restart: ${final.rows} rows, ${final.distinct} distinct, ${final.rows - final.distinct} duplicates; exit codes ${exit.code}, ${exit2.code}`,
    );
    // Source: shell convention, exit status 128 + signal number (SIGTERM = 15).
    expect(exit.code).toBe(143);
    expect(exit2.code).toBe(143);
    // Shutdown committed exactly what it had written: the restart resumed at the first unwritten row.
    expect(committedAtStop).toBe(afterStop.rows);
    expect(afterStop.rows).toBeGreaterThan(0);
    expect(afterStop.rows).toBeLessThan(TOTAL);
    expect(final).toEqual({ rows: TOTAL, distinct: TOTAL, min: 0, max: TOTAL - 1 });
  });

  // The store stalls (the test holds a lock on the table), the sinks fill up, and the bridge either
  // waits in its batch handler for room (pauseAfterMs long) or has paused its partitions
  // (pauseAfterMs 0) when the SIGTERM comes. The lock is released a moment later, inside the
  // shutdown deadline: the process must still flush, commit and exit 143.
  for (const [how, pauseAfterMs] of [
    ['waiting for room in a sink', 10_000],
    ['paused because a sink is full', 0],
  ] as const) {
    it(`SIGTERM while the bridge is ${how} ends in an ordered flush and commit, exit 143, and commits nothing that is not durable`, async () => {
      // Enough that the backlog is far from done when the lock is taken just after the first rows.
      const TOTAL = 120_000;
      const PARTITIONS = 3;
      const topic = await f.kafka.topic(PARTITIONS, 'dock_stall');
      const groupId = uniqueName('bridge_stall');
      const table = uniqueName('dock_stall');
      await createDockTable(f.schema.pool, table, 'insert');
      const config = {
        ...workerConfig(`stall${pauseAfterMs}`, topic, groupId, [{ table, mode: 'insert' as const }]),
        maxRecords: 500,
        maxPendingRecords: 1000,
        pauseAfterMs,
      };
      await f.checks.produce(topic, PARTITIONS, 0, TOTAL);
      const locker = await f.schema.pool.connect();
      let locked = false;
      try {
        const first = startWorker(config);
        await first.waitFor('ready', (l) => l.event === 'ready');
        await waitFor(
          'some rows to be written',
          async () => ((await f.checks.counts(table)).rows > 0 ? true : undefined),
          {
            timeoutMs: 60_000,
            intervalMs: 50,
          },
        );
        await locker.query('BEGIN');
        await locker.query(`LOCK TABLE ${table} IN ACCESS EXCLUSIVE MODE`);
        locked = true;
        // Only a report made while the table is locked counts: a pause before it may have ended.
        const beforeLock = new Set(first.lines);
        const stalled = (l: { event: string; [k: string]: unknown }) =>
          !beforeLock.has(l as (typeof first.lines)[number]) &&
          l.event === 'stats' &&
          (pauseAfterMs === 0 ? Number(l.paused) > 0 : Number(l.held) > 0 && Number(l.pauses) === 0);
        await first.waitFor(`the bridge to be ${how}`, stalled, 60_000);
        const committedBefore = await f.checks.committedTotal(groupId, topic);
        first.child.kill('SIGTERM');
        await sleep(1500);
        // The process is still flushing: the store has not taken the buffered rows yet.
        expect(first.child.exitCode).toBeNull();
        await locker.query('ROLLBACK');
        locked = false;
        const exit = await first.exited;
        const afterStop = await f.checks.counts(table);
        const committedAtStop = await f.checks.committedTotal(groupId, topic);

        const second = startWorker({ ...config, label: `${config.label}b`, pauseAfterMs: 1000 });
        await second.waitFor('ready', (l) => l.event === 'ready');
        await f.checks.waitCommittedToEnd(groupId, topic);
        const exit2 = await stopWorker(second, 'SIGTERM');
        const final = await f.checks.counts(table);
        console.log(
          `[bridge] SIGTERM while ${how}: committed ${committedBefore} before the signal, ${committedAtStop} at exit, ${afterStop.rows} rows at exit; ` +
            `after the restart ${final.rows} rows, ${final.distinct} distinct; exit codes ${exit.code}, ${exit2.code}`,
        );
        // Source: shell convention, exit status 128 + signal number (SIGTERM = 15).
        expect(exit.code).toBe(143);
        expect(exit2.code).toBe(143);
        // The flush after the signal wrote what the sinks had accepted, and the commit covered exactly that.
        expect(afterStop.rows).toBeGreaterThan(committedBefore);
        expect(committedAtStop).toBe(afterStop.rows);
        expect(afterStop.rows).toBe(afterStop.distinct);
        expect(final).toEqual({ rows: TOTAL, distinct: TOTAL, min: 0, max: TOTAL - 1 });
      } finally {
        if (locked) await locker.query('ROLLBACK').catch(() => undefined);
        locker.release();
      }
    });
  }

  it('kill -9 mid-stream loses nothing: upsert equals the source and insert duplicates stay within what was uncommitted', async () => {
    const TOTAL = 200_000;
    const PARTITIONS = 3;
    const topic = await f.kafka.topic(PARTITIONS, 'dock_kill');
    const groupId = uniqueName('bridge_kill');
    const insertTable = uniqueName('dock_kill_ins');
    const upsertTable = uniqueName('dock_kill_ups');
    await createDockTable(f.schema.pool, insertTable, 'insert');
    await createDockTable(f.schema.pool, upsertTable, 'upsert');
    const config = workerConfig('kill', topic, groupId, [
      { table: insertTable, mode: 'insert' },
      { table: upsertTable, mode: 'upsert' },
    ]);

    const producing = f.checks.produce(topic, PARTITIONS, 0, TOTAL);
    const first = startWorker(config);
    await first.waitFor('ready', (l) => l.event === 'ready');
    await waitFor(
      'the first worker to be mid-stream',
      () => (messagesTaken(first) >= TOTAL / 3 ? true : undefined),
      { timeoutMs: 120_000, intervalMs: 100 },
    );
    const exit = await stopWorker(first, 'SIGKILL');
    // A statement the server had already received when the client died still commits: wait until
    // the server has ended the worker's sessions before reading what is durable but uncommitted.
    await f.checks.sessionsGone(config.label);
    const c = await f.checks.committed(groupId, topic);
    const { rows } = await f.schema.pool.query<{ n: string }>(
      `SELECT count(*) AS n FROM ${insertTable} t WHERE t.koffset >= CASE t.kpartition ${[...c].map(([p, o]) => `WHEN ${p} THEN ${Math.max(0, o)}`).join(' ')} ELSE 0 END`,
    );
    const uncommitted = Number(rows[0]!.n);
    const atKill = await f.checks.counts(insertTable);
    await producing;
    expect(await f.checks.topicSize(topic)).toBe(TOTAL); // each event is in the topic once

    const second = startWorker({ ...config, label: 'kill2' });
    await second.waitFor('ready', (l) => l.event === 'ready');
    await f.checks.waitCommittedToEnd(groupId, topic);
    await stopWorker(second, 'SIGTERM');
    const ins = await f.checks.counts(insertTable);
    const ups = await f.checks.counts(upsertTable);
    const wrong = await f.schema.pool.query<{ n: string }>(
      `SELECT count(*) AS n FROM ${upsertTable} WHERE dock <> 'dock-' || lpad((seq % 97)::text, 3, '0') OR bikes <> seq % 13`,
    );
    const duplicates = ins.rows - ins.distinct;
    console.log(
      `[bridge] kill -9: at the kill the insert table held ${atKill.rows} rows, ${uncommitted} of them at or past the committed offsets (${JSON.stringify(Object.fromEntries(c))}); ` +
        `after the restart: insert ${ins.rows} rows / ${ins.distinct} distinct (${duplicates} duplicates), upsert ${ups.rows} rows`,
    );
    expect(exit.signal).toBe('SIGKILL');
    expect(ins.distinct).toBe(TOTAL); // at least once
    expect([ins.min, ins.max]).toEqual([0, TOTAL - 1]);
    // Only what was durable but not committed at the kill is read again, plus what the second
    // worker itself took past a commit of a partition it lost (a rejoin while no handler ran).
    const secondLost = Number(
      second.lines.filter((l) => l.event === 'stats').at(-1)?.uncommittedAtRevoke ?? 0,
    );
    expect(duplicates).toBeLessThanOrEqual(uncommitted + secondLost);
    expect(ups).toEqual({ rows: TOTAL, distinct: TOTAL, min: 0, max: TOTAL - 1 });
    expect(Number(wrong.rows[0]!.n)).toBe(0);
  });

  it('scales from 1 to 3 to 2 processes of one group while a producer keeps writing, missing nothing', async () => {
    const PARTITIONS = 6;
    const topic = await f.kafka.topic(PARTITIONS, 'dock_scale');
    const groupId = uniqueName('bridge_scale');
    const table = uniqueName('dock_scale');
    await createDockTable(f.schema.pool, table, 'insert');
    const config = (label: string) => workerConfig(label, topic, groupId, [{ table, mode: 'insert' }]);

    // A steady producer: 400 messages every 100 ms until told to stop.
    const producer = f.checks.steadyProducer(topic, PARTITIONS, 400);
    const owns = (ws: Worker[], sizes: number[]) => ownsSplit(ws, PARTITIONS, sizes);
    const workers: Worker[] = [];
    try {
      const a = startWorker(config('scale_a'));
      workers.push(a);
      await a.waitFor('ready', (l) => l.event === 'ready');
      await waitFor('A to own all 6 partitions', () => owns([a], [6]), { timeoutMs: 60_000 });
      await waitFor('A to take messages', () => (messagesTaken(a) > 4000 ? true : undefined), {
        timeoutMs: 60_000,
      });

      const b = startWorker(config('scale_b'));
      const c = startWorker(config('scale_c'));
      workers.push(b, c);
      await waitFor('3 members with 2 partitions each', () => owns([a, b, c], [2, 2, 2]), {
        timeoutMs: 90_000,
        intervalMs: 100,
      });
      await waitFor(
        'B and C to take messages',
        () => (messagesTaken(b) > 1000 && messagesTaken(c) > 1000 ? true : undefined),
        { timeoutMs: 60_000 },
      );

      const cExit = await stopWorker(c, 'SIGTERM');
      await waitFor('2 members with 3 partitions each', () => owns([a, b], [3, 3]), {
        timeoutMs: 90_000,
        intervalMs: 100,
      });
      const bTaken = messagesTaken(b);
      await waitFor(
        'B to take more messages after the scale-in',
        () => (messagesTaken(b) > bTaken + 1000 ? true : undefined),
        { timeoutMs: 60_000 },
      );

      const produced = await producer.stop();
      await f.checks.waitCommittedToEnd(groupId, topic);
      const exits = await Promise.all([stopWorker(a, 'SIGTERM'), stopWorker(b, 'SIGTERM')]);
      const final = await f.checks.counts(table);
      const perWorker = workers.map((w) => {
        const last = w.lines.filter((l) => l.event === 'stats').at(-1);
        return `${w.label}: ${String(last?.messages ?? 0)} taken, ${String(last?.skipped ?? 0)} redeliveries skipped, ${String(last?.flushes ?? 0)} rebalance flushes (${String(last?.flushTimeouts ?? 0)} timed out), ${String(last?.uncommittedAtRevoke ?? 0)} taken past the last commit of a partition it lost, ${w.lines.filter((l) => l.event === 'assign').length} assignments`;
      });
      const uncommittedAtRevoke = workers.reduce((n, w) => {
        const last = w.lines.filter((l) => l.event === 'stats').at(-1);
        return n + Number(last?.uncommittedAtRevoke ?? 0);
      }, 0);
      console.log(
        `[bridge] scale 1 → 3 → 2: produced ${produced}; table ${final.rows} rows, ${final.distinct} distinct, ${final.rows - final.distinct} duplicates; ${perWorker.join('; ')}`,
      );
      expect([cExit.code, ...exits.map((e) => e.code)]).toEqual([143, 143, 143]);
      expect(await f.checks.topicSize(topic)).toBe(produced); // each event is in the topic once
      expect(final.distinct).toBe(produced); // nothing missing
      expect([final.min, final.max]).toEqual([0, produced - 1]);
      // No process was killed. A rebalance seen inside a batch handler holds the group until the
      // flush and commit are done; one seen while no handler runs (kafkajs rejoins on its own) is
      // best effort. Only messages a member took past its last accepted commit of a partition it
      // then lost can be read twice, and each member counts them.
      expect(final.rows - final.distinct).toBeLessThanOrEqual(uncommittedAtRevoke);
    } finally {
      await producer.abandon();
      for (const w of workers)
        if (w.child.exitCode === null && w.child.signalCode === null) w.child.kill('SIGKILL');
    }
  });
});
