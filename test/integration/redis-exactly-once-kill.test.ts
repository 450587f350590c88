// Exactly-once from Kafka into Redis across process deaths: consumer processes
// (workers/redis-bridge-worker.ts) append every event to one list (RPUSH) or stream (XADD with
// server-made ids) — writes a replay would duplicate — and store each batch's next offsets in the
// same script (`storeOffsets`). The test kills them with SIGKILL mid-stream, while entries are
// stored but their offsets not yet committed in Kafka, restarts them, and reads every entry back.
//
// SPILLWAY_EOS_RUNS (default 2) runs of SPILLWAY_EOS_MESSAGES (default 50,000) messages per layout.
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { services, type TestRedis, uniqueName, waitFor, withRedis } from '../harness/index.js';
import { groupFixture } from './workers/group-checks.js';
import type { RedisWorkerConfig } from './workers/redis-bridge-worker.js';
import { startWorker, type Worker } from './workers/spawn.js';

const RUNS = Number(process.env.SPILLWAY_EOS_RUNS ?? 2);
const TOTAL = Number(process.env.SPILLWAY_EOS_MESSAGES ?? 50_000);
const PARTITIONS = 3;
const script = fileURLToPath(new URL('./workers/redis-bridge-worker.ts', import.meta.url));

const f = groupFixture('redis_eos');
let r: TestRedis;
beforeAll(async () => {
  r = await withRedis('redis_eos');
});
afterAll(async () => {
  await r?.drop();
});

type Layout = RedisWorkerConfig['layout'];

/** Entries in the list or stream. */
async function entries(layout: Layout, key: string): Promise<number> {
  return layout === 'list' ? r.redis.llen(key) : r.redis.xlen(key);
}

/** The `seq` of every entry, in order. */
async function sequence(layout: Layout, key: string): Promise<number[]> {
  if (layout === 'list') {
    const items = await r.redis.lrange(key, 0, -1);
    return items.map((i) => (JSON.parse(i) as { seq: number }).seq);
  }
  const items = await r.redis.xrange(key, '-', '+');
  return items.map(([, fields]) => Number(fields[fields.indexOf('seq') + 1]));
}

/** Waits until the server has closed the connection named after a killed worker. */
async function connectionGone(label: string): Promise<void> {
  await waitFor(
    `the Redis connection of ${label} to close`,
    async () => {
      const list = (await r.redis.client('LIST')) as string;
      return list.split('\n').some((l) => l.includes(` name=${label} `)) ? undefined : true;
    },
    { timeoutMs: 30_000, intervalMs: 50 },
  );
}

function config(
  label: string,
  topic: string,
  groupId: string,
  layout: Layout,
  run: number,
): RedisWorkerConfig {
  return {
    label,
    brokers: services().kafkaBrokers,
    topic,
    groupId,
    redisUrl: services().redisUrl,
    layout,
    dataKey: `${r.prefix}${layout}_${run}`,
    offsetsKey: `${r.prefix}offsets_${layout}_${run}`,
    deadLetterPath: join(f.dir, `${label}.dead-letter.ndjson`),
    // Odd runs: a commit tick longer than the run up to the kill (nothing committed in Kafka when
    // it comes); even runs: a short one (the restart starts past committed offsets, and still
    // finds entries stored beyond them).
    commitIntervalMs: run % 2 === 1 ? 5000 : 300,
  };
}

function lastStats(w: Worker): Record<string, unknown> {
  return w.lines.filter((l) => l.event === 'stats').at(-1) ?? {};
}

describe('exactly-once from Kafka into Redis', () => {
  for (const layout of ['list', 'stream'] as const) {
    it(`a ${layout}: kill -9 mid-stream, ${RUNS} runs of ${TOTAL} messages: after the restart it holds every message exactly once`, async () => {
      let replayedStored = 0;
      for (let run = 1; run <= RUNS; run++) {
        const started = Date.now();
        const topic = await f.kafka.topic(PARTITIONS, `reos_${layout}`);
        const groupId = uniqueName(`reos_${layout}`);
        const cfg = config(`reos_${layout}_${run}`, topic, groupId, layout, run);

        const producing = f.checks.produce(topic, PARTITIONS, 0, TOTAL);
        const first = startWorker(cfg, script);
        await first.waitFor('ready', (l) => l.event === 'ready');
        // Kill mid-stream (a third of the way in on the first run, further on later ones), while
        // some entries are stored but their offsets not yet committed in Kafka, so that the
        // restart has something it must not write again.
        const killAt = Math.floor((TOTAL * run) / (RUNS + 1));
        await waitFor(
          `${killAt} entries, some stored past the committed offsets`,
          async () => {
            const stored = await entries(layout, cfg.dataKey);
            return stored >= killAt && stored > (await f.checks.committedTotal(groupId, topic))
              ? true
              : undefined;
          },
          { timeoutMs: 120_000, intervalMs: 10 },
        );
        first.child.kill('SIGKILL');
        const exit = await first.exited;
        // A script the server had received in full still runs after the client died.
        await connectionGone(cfg.label);
        const atKill = await entries(layout, cfg.dataKey);
        const committedAtKill = await f.checks.committedTotal(groupId, topic);
        await producing;

        const second = startWorker({ ...cfg, label: `${cfg.label}b`, commitIntervalMs: 300 }, script);
        await second.waitFor('ready', (l) => l.event === 'ready');
        await f.checks.waitCommittedToEnd(groupId, topic);
        second.child.kill('SIGTERM');
        const { code } = await second.exited;

        const seqs = await sequence(layout, cfg.dataKey);
        const distinct = new Set(seqs);
        const stored = await r.redis.hgetall(cfg.offsetsKey);
        const stats = lastStats(second);
        console.log(
          `[exactly-once] redis ${layout} run ${run}/${RUNS}: at the kill ${atKill} entries, group committed ${committedAtKill} (${atKill - committedAtKill} stored but not committed); ` +
            `after the restart ${seqs.length} entries / ${distinct.size} distinct, ${String(stats.skippedStored)} messages skipped as stored, ` +
            `${String(stats.offsetConflicts)} offset conflicts; ${((Date.now() - started) / 1000).toFixed(1)} s`,
        );
        replayedStored += atKill - committedAtKill;
        expect(exit.signal).toBe('SIGKILL');
        // Source: shell convention, exit status 128 + signal number (SIGTERM = 15).
        expect(code).toBe(143);
        expect(seqs.length).toBe(TOTAL);
        expect(distinct.size).toBe(TOTAL);
        expect(seqs.reduce((a, b) => Math.min(a, b), Number.POSITIVE_INFINITY)).toBe(0);
        expect(seqs.reduce((a, b) => Math.max(a, b), Number.NEGATIVE_INFINITY)).toBe(TOTAL - 1);
        expect(stats.deadLettered).toBe(0);
        // The stored next offsets are the ends of the partitions (each got a third of the messages).
        expect(stored).toEqual({
          [`${groupId}/${topic}/0`]: String(Math.ceil(TOTAL / 3)),
          [`${groupId}/${topic}/1`]: String(Math.ceil((TOTAL - 1) / 3)),
          [`${groupId}/${topic}/2`]: String(Math.ceil((TOTAL - 2) / 3)),
        });
      }
      // The kills left entries stored but not committed in Kafka: a replay without the stored
      // offsets would have appended those again.
      expect(replayedStored).toBeGreaterThan(0);
    });
  }
});
