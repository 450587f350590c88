// The README's Kafka bridge example, compiled as it stands and run as its own process against the
// real broker and PostgreSQL. A SIGTERM mid-stream ends it with 143, the table holding exactly
// what the sink accepted and the group's committed offsets at exactly those messages (a committed
// offset is the next offset to read — Apache Kafka documentation, consumer offset management);
// a second run in the same group then brings the table to every message, once.
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import {
  services,
  type TestKafka,
  type TestSchema,
  uniqueName,
  withKafka,
  withSchema,
} from '../harness/index.js';
import { createDockStatus, FEED_START_MS, readmeProgram, urlForSchema } from './readme/dock-status.js';
import { compiledProject, type ReadmeProject } from './readme/project.js';
import { describeRun, instrumented, type RunResult, startProgram, whileRunning } from './readme/run.js';

const MESSAGES = 60_000;
const PARTITIONS = 3;
const bridge = instrumented(readmeProgram('bridge-into-postgres'), 'bridge-into-postgres', 'docks');

let project: ReadmeProject;
let kafka: TestKafka;
let schema: TestSchema;
let topic: string;
let dir: string;

beforeAll(async () => {
  project = await compiledProject([bridge]);
  [kafka, schema] = await Promise.all([withKafka(), withSchema('readme_bridge')]);
  await schema.pool.query(createDockStatus);
  topic = await kafka.topic(PARTITIONS, 'readme');
  dir = mkdtempSync(join(tmpdir(), 'spillway-readme-bridge-'));
  const producer = kafka.kafka.producer({ allowAutoTopicCreation: false, idempotent: true });
  await producer.connect();
  try {
    for (let from = 0; from < MESSAGES; from += 10_000) {
      const messages = [];
      for (let i = from; i < from + 10_000; i++) {
        const at = new Date(FEED_START_MS + i * 1000).toISOString();
        messages.push({
          partition: i % PARTITIONS,
          value: JSON.stringify({ dockId: `dock-${i % 400}`, bikes: i % 23, at }),
        });
      }
      await producer.send({ topic, acks: -1, messages });
    }
  } finally {
    await producer.disconnect();
  }
});
afterAll(async () => {
  project?.remove();
  await Promise.all([kafka?.drop(), schema?.drop()]);
  if (dir) rmSync(dir, { recursive: true, force: true });
});

async function tableCounts(): Promise<{ rows: number; distinct: number }> {
  const { rows } = await schema.pool.query<{ rows: number; distinct: number }>(
    'SELECT count(*)::int AS rows, count(DISTINCT reported_at)::int AS distinct FROM dock_status',
  );
  return rows[0]!;
}

async function committedTotal(groupId: string): Promise<number> {
  const [t] = await kafka.admin.fetchOffsets({ groupId, topics: [topic] });
  return (t?.partitions ?? []).reduce((sum, p) => sum + Math.max(0, Number(p.offset)), 0);
}

/** Runs the example until the table holds `untilRows` rows, then sends SIGTERM. */
async function runUntil(groupId: string, untilRows: number): Promise<RunResult> {
  const run = startProgram(project.js(bridge.name), {
    cwd: dir,
    env: {
      DATABASE_URL: urlForSchema(schema.schema),
      KAFKA_BROKERS: services().kafkaBrokers.join(','),
      KAFKA_TOPIC: topic,
      KAFKA_GROUP: groupId,
      DEAD_LETTER_DIR: dir,
    },
  });
  await whileRunning(
    run,
    `${untilRows} rows in the table`,
    async () => (await tableCounts()).rows >= untilRows,
    150_000,
  );
  run.child.kill('SIGTERM');
  return run.done;
}

describe('the README Kafka bridge example as a program', () => {
  it('exits 143 on SIGTERM mid-stream with every accepted message in the table and committed, and a second run completes the topic once', async () => {
    const groupId = uniqueName('readme_group');

    const first = await runUntil(groupId, 1);
    expect(first.code, describeRun(first)).toBe(143);
    expect(first.report, describeRun(first)).toBeDefined();
    const afterFirst = await tableCounts();
    expect(afterFirst.rows).toBe(first.report!.accepted);
    expect(first.report!.pendingRecords).toBe(0);
    expect(afterFirst.rows).toBeLessThan(MESSAGES);
    expect(afterFirst.distinct).toBe(afterFirst.rows);
    expect(await committedTotal(groupId)).toBe(afterFirst.rows);

    const second = await runUntil(groupId, MESSAGES);
    expect(second.code, describeRun(second)).toBe(143);
    const afterSecond = await tableCounts();
    expect(afterSecond).toEqual({ rows: MESSAGES, distinct: MESSAGES });
    expect(second.report!.accepted).toBe(MESSAGES - afterFirst.rows);
    expect(await committedTotal(groupId)).toBe(MESSAGES);
  });
});
