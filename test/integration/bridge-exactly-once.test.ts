// Exactly-once from Kafka into PostgreSQL across process deaths: consumer processes
// (workers/bridge-worker.ts with `exactlyOnce`) store each batch's next offsets in the batch's own
// transaction, and on assignment skip what is stored. The test kills them with SIGKILL mid-stream,
// restarts them and counts every row: an append-only table (insert and copy modes, no key to
// deduplicate on) must hold every message exactly once.
//
// SPILLWAY_EOS_RUNS (default 5) runs of SPILLWAY_EOS_MESSAGES (default 200,000) messages per mode.
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { services, uniqueName, waitFor } from '../harness/index.js';
import type { WorkerConfig } from './workers/bridge-worker.js';
import { createDockTable } from './workers/dock-rows.js';
import { groupFixture } from './workers/group-checks.js';
import { messagesTaken, startWorker, type Worker } from './workers/spawn.js';

const RUNS = Number(process.env.SPILLWAY_EOS_RUNS ?? 5);
const TOTAL = Number(process.env.SPILLWAY_EOS_MESSAGES ?? 200_000);
// A run takes about 20-25 s on a quiet 2-core machine; allow for a loaded one.
const RUN_TIMEOUT_MS = 75_000;
const PARTITIONS = 3;

const f = groupFixture('bridge_eos');

/** The next offsets the sink stored with its rows, by partition. */
async function storedOffsets(groupId: string, table: string): Promise<Record<string, number>> {
  const { rows } = await f.schema.pool.query<{ kpartition: number; next_offset: string }>(
    `SELECT kpartition, next_offset FROM spillway_offsets WHERE consumer_group = $1 AND target = $2`,
    [groupId, `"${table}"`],
  );
  return Object.fromEntries(rows.map((r) => [String(r.kpartition), Number(r.next_offset)]));
}

function config(
  label: string,
  topic: string,
  groupId: string,
  table: string,
  mode: 'insert' | 'copy',
): WorkerConfig {
  return {
    label,
    brokers: services().kafkaBrokers,
    topic,
    groupId,
    pgUrl: `${services().pgUrl}?options=${encodeURIComponent(`-c search_path=${f.schema.schema}`)}`,
    tables: [{ table, mode }],
    deadLetterPath: join(f.dir, `${label}.dead-letter.ndjson`),
    exactlyOnce: true,
    // A long commit tick leaves a wide window of rows stored but not committed, whatever the speed.
    commitIntervalMs: 5000,
  };
}

/** Restarts the group with a fresh worker, waits until it committed everything, and stops it. */
async function finish(cfg: WorkerConfig, topic: string): Promise<{ worker: Worker; code: number | null }> {
  const worker = startWorker(cfg);
  await worker.waitFor('ready', (l) => l.event === 'ready');
  await f.checks.waitCommittedToEnd(cfg.groupId, topic);
  worker.child.kill('SIGTERM');
  const { code } = await worker.exited;
  return { worker, code };
}

function lastStats(w: Worker): Record<string, unknown> {
  return w.lines.filter((l) => l.event === 'stats').at(-1) ?? {};
}

describe('exactly-once from Kafka into PostgreSQL', () => {
  for (const mode of ['insert', 'copy'] as const) {
    it(
      `${mode} mode: kill -9 mid-stream, ${RUNS} runs of ${TOTAL} messages: after the restart the table holds every message exactly once`,
      async () => {
        let replayedStored = 0;
        for (let run = 1; run <= RUNS; run++) {
          const started = Date.now();
          const topic = await f.kafka.topic(PARTITIONS, `eos_${mode}`);
          const groupId = uniqueName(`eos_${mode}`);
          const table = uniqueName(`eos_${mode}`);
          await createDockTable(f.schema.pool, table, 'insert');
          const cfg = config(`eos_${mode}_${run}`, topic, groupId, table, mode);

          const producing = f.checks.produce(topic, PARTITIONS, 0, TOTAL);
          const first = startWorker(cfg);
          await first.waitFor('ready', (l) => l.event === 'ready');
          await waitFor(
            'the first worker to be mid-stream',
            () => (messagesTaken(first) >= TOTAL / 3 ? true : undefined),
            {
              timeoutMs: 120_000,
              intervalMs: 50,
            },
          );
          // Kill while some rows are stored but not yet committed in Kafka (the window a commit tick
          // closes), so that the restart has something it must not write again.
          await waitFor(
            'rows stored past the committed offsets',
            async () =>
              (await f.checks.counts(table)).rows > (await f.checks.committedTotal(groupId, topic))
                ? true
                : undefined,
            { timeoutMs: 60_000, intervalMs: 20 },
          );
          first.child.kill('SIGKILL');
          const exit = await first.exited;
          // A transaction the server had received when the client died may still commit.
          await f.checks.sessionsGone(cfg.label);
          const atKill = await f.checks.counts(table);
          const committedAtKill = await f.checks.committedTotal(groupId, topic);
          await producing;

          const second = await finish({ ...cfg, label: `${cfg.label}b` }, topic);
          const final = await f.checks.counts(table);
          const stored = await storedOffsets(groupId, table);
          const stats = lastStats(second.worker);
          console.log(
            `[exactly-once] ${mode} run ${run}/${RUNS}: at the kill ${atKill.rows} rows, group committed ${committedAtKill} (${atKill.rows - committedAtKill} stored but not committed); ` +
              `after the restart ${final.rows} rows / ${final.distinct} distinct, ${String(stats.skippedStored)} messages skipped as stored; ${((Date.now() - started) / 1000).toFixed(1)} s`,
          );
          replayedStored += atKill.rows - committedAtKill;
          expect(exit.signal).toBe('SIGKILL');
          // Source: shell convention, exit status 128 + signal number (SIGTERM = 15).
          expect(second.code).toBe(143);
          expect(final).toEqual({ rows: TOTAL, distinct: TOTAL, min: 0, max: TOTAL - 1 });
          // The stored next offsets are the ends of the partitions (each got a third of the messages).
          expect(stored).toEqual({
            '0': Math.ceil(TOTAL / 3),
            '1': Math.ceil((TOTAL - 1) / 3),
            '2': Math.ceil((TOTAL - 2) / 3),
          });
        }
        // The kills left rows stored but not committed in Kafka: a replay without the stored offsets
        // would have written those again.
        expect(replayedStored).toBeGreaterThan(0);
      },
      RUNS * RUN_TIMEOUT_MS,
    );
  }

  it('a kill in the first second, before any Kafka commit, still leaves every message exactly once', async () => {
    const topic = await f.kafka.topic(PARTITIONS, 'eos_early');
    const groupId = uniqueName('eos_early');
    const table = uniqueName('eos_early');
    await createDockTable(f.schema.pool, table, 'insert');
    await f.checks.produce(topic, PARTITIONS, 0, TOTAL);
    // No commit tick before the kill: everything written is stored but not committed in Kafka.
    const cfg = { ...config('eos_early', topic, groupId, table, 'copy'), commitIntervalMs: 600_000 };
    const first = startWorker(cfg);
    await first.waitFor('ready', (l) => l.event === 'ready');
    const ready = Date.now();
    await waitFor(
      'the first rows',
      async () => ((await f.checks.counts(table)).rows > 0 ? true : undefined),
      {
        timeoutMs: 60_000,
        intervalMs: 20,
      },
    );
    first.child.kill('SIGKILL');
    const killedAfterMs = Date.now() - ready;
    await first.exited;
    await f.checks.sessionsGone(cfg.label);
    const atKill = await f.checks.counts(table);
    const committedAtKill = await f.checks.committed(groupId, topic);

    const second = await finish({ ...cfg, label: 'eos_early_b', commitIntervalMs: 300 }, topic);
    const final = await f.checks.counts(table);
    console.log(
      `[exactly-once] kill ${killedAfterMs} ms after ready: ${atKill.rows} rows stored, Kafka offsets committed ${JSON.stringify(Object.fromEntries(committedAtKill))}; ` +
        `after the restart ${final.rows} rows / ${final.distinct} distinct, ${String(lastStats(second.worker).skippedStored)} skipped as stored`,
    );
    expect([...committedAtKill.values()].every((o) => o < 0)).toBe(true); // nothing committed in Kafka
    expect(atKill.rows).toBeGreaterThan(0);
    expect(second.code).toBe(143);
    expect(final).toEqual({ rows: TOTAL, distinct: TOTAL, min: 0, max: TOTAL - 1 });
  });
});
