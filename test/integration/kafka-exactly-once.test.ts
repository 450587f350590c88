// Exactly-once from Kafka into Kafka across process deaths: consumer processes
// (workers/kafka-eos-worker.ts) write each source partition's batch and its next offset in one
// Kafka transaction. The test kills them with SIGKILL mid-stream, while some output is committed
// in transactions but not yet in the bridge's own group, restarts them, and reads the output topic
// with a read_committed consumer: it must hold every input message exactly once.
//
// SPILLWAY_KAFKA_EOS_RUNS (default 2) runs of SPILLWAY_KAFKA_EOS_MESSAGES (default 20,000) messages;
// the test of a member stopped past its session (a zombie) streams at most 20,000.
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import type { Producer } from 'kafkajs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { services, type TestKafka, uniqueName, waitFor, withKafka } from '../harness/index.js';
import { dockEvent, encodeEvent } from './workers/dock-rows.js';
import type { EnrichedDockEvent, KafkaEosWorkerConfig } from './workers/kafka-eos-worker.js';
import { readTopic, readTopicJava } from './workers/read-topic.js';
import { messagesTaken, startWorker, type Worker } from './workers/spawn.js';

const RUNS = Number(process.env.SPILLWAY_KAFKA_EOS_RUNS ?? 2);
const TOTAL = Number(process.env.SPILLWAY_KAFKA_EOS_MESSAGES ?? 20_000);
const PARTITIONS = 3;
const program = fileURLToPath(new URL('./workers/kafka-eos-worker.ts', import.meta.url));

let k: TestKafka;
let producer: Producer;
let dir: string;

beforeAll(async () => {
  k = await withKafka();
  // Idempotent, so that the input topic itself holds each event once.
  producer = k.kafka.producer({ allowAutoTopicCreation: false, idempotent: true });
  await producer.connect();
  dir = mkdtempSync(join(tmpdir(), 'spillway-kafka-eos-'));
});

afterAll(async () => {
  await producer?.disconnect();
  await k?.drop();
  if (dir) rmSync(dir, { recursive: true, force: true });
});

/** Dock events `from` … `to - 1`, event `seq` to partition `seq % PARTITIONS`. */
async function produce(topic: string, from: number, to: number): Promise<void> {
  for (let start = from; start < to; start += 2000) {
    const messages = [];
    for (let seq = start; seq < Math.min(to, start + 2000); seq++)
      messages.push({ partition: seq % PARTITIONS, value: encodeEvent(dockEvent(seq)) });
    await producer.send({ topic, acks: -1, messages });
  }
}

/** A group's committed offsets by partition (none: absent). */
async function committed(groupId: string, topic: string): Promise<Map<number, number>> {
  const [t] = await k.admin.fetchOffsets({ groupId, topics: [topic] });
  return new Map(
    (t?.partitions ?? []).filter((p) => Number(p.offset) >= 0).map((p) => [p.partition, Number(p.offset)]),
  );
}

const sum = (m: Map<number, number>) => [...m.values()].reduce((a, b) => a + b, 0);

async function endOffsets(topic: string): Promise<Map<number, number>> {
  return new Map((await k.admin.fetchTopicOffsets(topic)).map((o) => [o.partition, Number(o.high)]));
}

/**
 * The dock events the Apache Kafka Java client reads from `topic` (read_committed unless
 * `readUncommitted`), and how many kafkajs' read_committed reader gets, for the log.
 */
async function readAll(topic: string, readUncommitted = false): Promise<EnrichedDockEvent[]> {
  const values = await readTopicJava(services().kafkaBrokers, topic, readUncommitted);
  return values.map((v) => JSON.parse(v) as EnrichedDockEvent);
}

function lastStats(w: Worker): Record<string, unknown> {
  return w.lines.filter((l) => l.event === 'stats').at(-1) ?? {};
}

describe('exactly-once from Kafka into Kafka', () => {
  it(
    `kill -9 mid-stream, ${RUNS} runs of ${TOTAL} messages: after the restart a read_committed consumer of the output sees every input message exactly once`,
    async () => {
      let replayed = 0;
      for (let run = 1; run <= RUNS; run++) {
        const started = Date.now();
        const input = await k.topic(PARTITIONS, 'eos_in');
        const output = await k.topic(PARTITIONS, 'eos_out');
        const groupId = uniqueName('eos_k2k');
        const prefix = uniqueName('txn');
        // The adapter's default offsets group: `${transactionalIdPrefix}-${group}`.
        const offsetsGroup = `${prefix}-${groupId}`;
        const cfg: KafkaEosWorkerConfig = {
          label: `eos_k2k_${run}`,
          brokers: services().kafkaBrokers,
          inputTopic: input,
          outputTopic: output,
          groupId,
          transactionalIdPrefix: prefix,
          deadLetterPath: join(dir, `run${run}.dead-letter.ndjson`),
          // A long tick of the bridge's own commits: the kill finds transactions committed past them.
          commitIntervalMs: 5000,
        };
        const producing = produce(input, 0, TOTAL);
        const first = startWorker(cfg, program);
        await first.waitFor('ready', (l) => l.event === 'ready');
        await waitFor(
          'the first worker to be mid-stream',
          () => (messagesTaken(first) >= TOTAL / 3 ? true : undefined),
          {
            timeoutMs: 120_000,
            intervalMs: 50,
          },
        );
        await waitFor(
          'offsets stored in transactions past the bridge group commits',
          async () =>
            sum(await committed(offsetsGroup, input)) > sum(await committed(groupId, input))
              ? true
              : undefined,
          { timeoutMs: 60_000, intervalMs: 20 },
        );
        first.child.kill('SIGKILL');
        const exit = await first.exited;
        const storedAtKill = sum(await committed(offsetsGroup, input));
        const committedAtKill = sum(await committed(groupId, input));
        await producing;

        const second = startWorker({ ...cfg, label: `${cfg.label}b`, commitIntervalMs: 300 }, program);
        await second.waitFor('ready', (l) => l.event === 'ready');
        const ends = await endOffsets(input);
        await waitFor(
          'the stored offsets at the end of every input partition',
          async () => {
            const stored = await committed(offsetsGroup, input);
            return [...ends].every(([p, end]) => stored.get(p) === end) ? true : undefined;
          },
          { timeoutMs: 120_000, intervalMs: 250 },
        ).catch((error: unknown) => {
          throw new Error(
            `${(error as Error).message}\n${JSON.stringify(lastStats(second))}\n${second.stderr()}`,
          );
        });
        second.child.kill('SIGTERM');
        const stop = await second.exited;

        const got = await readAll(output);
        const byKafkajs = (await readTopic(k.kafka, output)).length;
        // What the aborted transactions (the one the kill cut short among them) left in the log.
        const aborted = (await readAll(output, true)).length - got.length;
        const seqs = new Set(got.map((e) => e.seq));
        const sources = new Set(got.map((e) => `${e.partition}:${e.offset}`));
        const stats = lastStats(second);
        console.log(
          `[kafka exactly-once] run ${run}/${RUNS}: at the kill ${storedAtKill} offsets stored in transactions, bridge group committed ${committedAtKill}; ` +
            `after the restart ${got.length} messages read committed / ${seqs.size} distinct (kafkajs' reader: ${byKafkajs}), ${aborted} more read uncommitted (aborted), ` +
            `output end offsets ${sum(await endOffsets(output))} (control records included); restart: ${String(stats.skippedStored)} skipped as stored, sink ${JSON.stringify(stats.sink)}; ${((Date.now() - started) / 1000).toFixed(1)} s`,
        );
        if (got.length !== seqs.size) {
          // Which source partitions and offsets the copies came from: a whole transaction of one
          // source partition written twice points at the offsets read after the fence.
          const count = new Map<number, number>();
          for (const e of got) count.set(e.seq, (count.get(e.seq) ?? 0) + 1);
          const twice = got.filter((e) => count.get(e.seq)! > 1).map((e) => `${e.partition}:${e.offset}`);
          console.log(`[kafka exactly-once] copies at source ${[...new Set(twice)].sort().join(' ')}`);
        }
        replayed += storedAtKill - committedAtKill;
        expect(exit.signal).toBe('SIGKILL');
        // Source: shell convention, exit status 128 + signal number (SIGTERM = 15).
        expect(stop.code).toBe(143);
        // Source: Apache Kafka documentation, Message Delivery Semantics and isolation.level: a
        // read_committed consumer sees each message of a committed transaction once, none of an aborted one.
        // Nothing lost.
        expect(seqs.size).toBe(TOTAL);
        expect(sources.size).toBe(TOTAL);
        // Written once. Before the sink read stored offsets with require_stable, 2 of 42 runs read
        // back 247 and 219 copies: one source partition's transaction, written again after the
        // fence read the offsets from before it.
        expect(got.length).toBe(TOTAL);
        expect(Math.min(...seqs)).toBe(0);
        expect(Math.max(...seqs)).toBe(TOTAL - 1);
        expect(got.every((e) => e.source === input && e.seq % PARTITIONS === e.partition)).toBe(true);
      }
      // The kills left transactions committed past the bridge's own commits: a replay from the
      // bridge group's offsets alone would have written those again.
      expect(replayed).toBeGreaterThan(0);
    },
    Math.max(180_000, RUNS * 45_000),
  );

  it('a member stopped past its session is fenced: its late transactions fail, it writes only past what the new owner stored, and the output holds every message once', async () => {
    const total = Math.min(TOTAL, 20_000);
    const input = await k.topic(PARTITIONS, 'zombie_in');
    const output = await k.topic(PARTITIONS, 'zombie_out');
    const groupId = uniqueName('zombie_k2k');
    const prefix = uniqueName('txn');
    const offsetsGroup = `${prefix}-${groupId}`;
    const cfg: KafkaEosWorkerConfig = {
      label: 'zombie_a',
      brokers: services().kafkaBrokers,
      inputTopic: input,
      outputTopic: output,
      groupId,
      transactionalIdPrefix: prefix,
      deadLetterPath: join(dir, 'zombie.dead-letter.ndjson'),
      // The broker's smallest session by default (group.min.session.timeout.ms): a quick eviction.
      sessionTimeoutMs: 6000,
      // Small batches, many transactions: the stop finds one open or buffered records waiting.
      maxRecords: 200,
    };
    const producing = produce(input, 0, total);
    const a = startWorker(cfg, program);
    await a.waitFor('ready', (l) => l.event === 'ready');
    await waitFor('worker a to be mid-stream', () => (messagesTaken(a) >= total / 4 ? true : undefined), {
      timeoutMs: 120_000,
      intervalMs: 20,
    });
    // Frozen, not dead: its producers and buffered records come back after the group moved on.
    a.child.kill('SIGSTOP');
    const storedAtStop = sum(await committed(offsetsGroup, input));
    const b = startWorker({ ...cfg, label: 'zombie_b' }, program);
    try {
      await b.waitFor('ready', (l) => l.event === 'ready');
      await waitFor(
        'worker b to own every partition and store past worker a',
        async () =>
          b.assigned().length === PARTITIONS && sum(await committed(offsetsGroup, input)) > storedAtStop
            ? true
            : undefined,
        { timeoutMs: 60_000, intervalMs: 100 },
      );
      a.child.kill('SIGCONT');
      await producing;
      const ends = await endOffsets(input);
      await waitFor(
        'the stored offsets at the end of every input partition',
        async () => {
          const stored = await committed(offsetsGroup, input);
          return [...ends].every(([p, end]) => stored.get(p) === end) ? true : undefined;
        },
        { timeoutMs: 120_000, intervalMs: 250 },
      );
    } finally {
      a.child.kill('SIGCONT');
      a.child.kill('SIGTERM');
      b.child.kill('SIGTERM');
    }
    const [exitA, exitB] = await Promise.all([a.exited, b.exited]);
    const got = await readAll(output);
    const seqs = new Set(got.map((e) => e.seq));
    const statsA = lastStats(a).sink as Record<string, number>;
    const statsB = lastStats(b).sink as Record<string, number>;
    console.log(
      `[kafka exactly-once] zombie: stopped worker a at ${storedAtStop} stored offsets; a ${JSON.stringify(statsA)}; b ${JSON.stringify(statsB)}; ` +
        `${got.length} messages read committed / ${seqs.size} distinct`,
    );
    expect(exitA.code).toBe(143);
    expect(exitB.code).toBe(143);
    // Worker b took the partitions over: it fenced worker a's transactional ids, and worker a's
    // transactions after the stop were refused (INVALID_PRODUCER_EPOCH) instead of committed.
    expect(statsB.fences).toBeGreaterThanOrEqual(PARTITIONS);
    expect(statsA.fencedOut).toBeGreaterThan(0);
    // Source: Apache Kafka documentation, transactional producer: a producer fenced by a newer
    // epoch of its transactional id cannot commit; read_committed consumers see committed data only.
    expect(got.length).toBe(total);
    expect(seqs.size).toBe(total);
  });
});
