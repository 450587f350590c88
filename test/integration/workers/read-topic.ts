// Reading a whole topic back as a downstream consumer would: a fresh group from the beginning, up
// to the high watermarks as they are when the read starts.
import { execFile } from 'node:child_process';
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { promisify } from 'node:util';
import type { Kafka } from 'kafkajs';
import { uniqueName, waitFor } from '../../harness/index.js';
import { ensureKafkaJars, javaBin } from '../../harness/kafka.js';
import { onProcessExit, run } from '../../harness/process.js';

/**
 * The values a consumer gets from `topic`, read_committed (kafkajs' default isolation) unless
 * `readUncommitted`, one per position in the topic. Each partition is read until a batch reaches
 * its high watermark: a batch's last offset counts the control records and aborted messages it
 * skipped, so the read ends even when a partition ends with a transaction marker. A message the
 * reader's own group hands out again (kafkajs restarts a partition from the group's committed
 * offset when the group rejoins) is kept once: what counts is what the topic holds.
 */
export async function readTopic(kafka: Kafka, topic: string, readUncommitted = false): Promise<string[]> {
  const admin = kafka.admin();
  await admin.connect();
  // Asked again for up to 10 s: right after a topic is made, a broker may not lead it yet
  // (NOT_LEADER_FOR_PARTITION, seen under load).
  const offsets = await waitFor(`the end offsets of ${topic}`, () => admin.fetchTopicOffsets(topic), {
    timeoutMs: 10_000,
    intervalMs: 100,
  }).finally(() => admin.disconnect());
  const ends = new Map(offsets.map((o) => [o.partition, Number(o.high)]));
  const reached = new Map<number, number>();
  const values = new Map<string, string>();
  let again = 0;
  const consumer = kafka.consumer({ groupId: uniqueName('reader'), maxWaitTimeInMs: 200, readUncommitted });
  const off = consumer.on(consumer.events.END_BATCH_PROCESS, (e) => {
    const { partition, lastOffset } = e.payload;
    reached.set(partition, Math.max(reached.get(partition) ?? 0, Number(lastOffset) + 1));
  });
  await consumer.connect();
  await consumer.subscribe({ topic, fromBeginning: true });
  await consumer.run({
    eachBatch: async ({ batch }) => {
      for (const m of batch.messages) {
        const at = `${batch.partition}:${m.offset}`;
        if (values.has(at)) again++;
        values.set(at, m.value?.toString() ?? '');
      }
    },
  });
  try {
    await waitFor(
      `the end of every partition of ${topic}`,
      () => ([...ends].every(([p, end]) => end === 0 || (reached.get(p) ?? 0) >= end) ? true : undefined),
      { timeoutMs: 120_000, intervalMs: 100 },
    );
  } finally {
    off();
    await consumer.disconnect();
  }
  if (again > 0) console.log(`[read ${topic}] the reader's group handed out ${again} message(s) again`);
  return [...values.values()];
}

let compiled: Promise<string> | undefined;

/** Compiles ReadTopic.java once per process; resolves with the class path to run it. */
function readerClassPath(): Promise<string> {
  compiled ??= (async () => {
    const { dir: jars } = await ensureKafkaJars();
    const out = mkdtempSync(join(tmpdir(), 'spillway-read-topic-'));
    onProcessExit(() => rmSync(out, { recursive: true, force: true }));
    const source = fileURLToPath(new URL('./ReadTopic.java', import.meta.url));
    await run('javac', ['-cp', `${jars}/*`, '-d', out, source], { timeoutMs: 120_000 });
    return `${out}:${jars}/*`;
  })();
  return compiled;
}

/**
 * The values the Apache Kafka Java client reads from `topic` (from the beginning to the end
 * offsets as they are when it starts), with `isolation.level` read_committed unless
 * `readUncommitted`. The broker project's own consumer is the reference for what a read_committed
 * reader must see. On the same topic, after a kill left 1,000 aborted messages in it, this read
 * each of 20,000 messages once while kafkajs 2.2.4's read_committed consumer counted 20,123.
 */
export async function readTopicJava(
  brokers: readonly string[],
  topic: string,
  readUncommitted = false,
): Promise<string[]> {
  const classPath = await readerClassPath();
  const { stdout } = await promisify(execFile)(
    javaBin(),
    [
      '-cp',
      classPath,
      'ReadTopic',
      brokers.join(','),
      topic,
      readUncommitted ? 'read_uncommitted' : 'read_committed',
    ],
    { maxBuffer: 256 * 1024 * 1024, timeout: 120_000 },
  );
  return stdout.split('\n').filter((line) => line.length > 0);
}
