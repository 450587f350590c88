// tuneKafka() and `spillway tune --topic` against the harness's real broker: the scratch topic is
// made with the user's topic's partition count, replication factor and topic configs as read from
// the broker, receives the trials' messages, and is deleted afterwards, also on Ctrl-C; the user's
// topic is never written (its offsets and configs are the same before and after).
import { mkdtemp, rm, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { byCost, type KafkaTuneOutcome, tuneKafka } from '@spillway/tuner';
import type { Admin } from 'kafkajs';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { services, sleep, type TestKafka, uniqueTopic, waitFor, withKafka } from '../harness/index.js';
import { interruptTune } from './tune-interrupt.js';

const PARTITIONS = 3;
const CONFIGS = [
  { name: 'max.message.bytes', value: '262144' },
  { name: 'retention.ms', value: '3600000' },
];

let k: TestKafka;
let topic: string;
let dir: string;
let sample: string;

beforeAll(async () => {
  k = await withKafka();
  // The user's topic: Tandem Bikes' enriched dock events, three partitions, two topic configs,
  // already holding 30 messages.
  topic = uniqueTopic('tune_kafka');
  await k.admin.createTopics({
    topics: [{ topic, numPartitions: PARTITIONS, replicationFactor: 1, configEntries: CONFIGS }],
  });
  await waitFor(
    `leaders of ${topic}`,
    async () => {
      const parts = (await k.admin.fetchTopicMetadata({ topics: [topic] })).topics[0]?.partitions ?? [];
      return parts.length === PARTITIONS && parts.every((p) => p.leader >= 0) ? true : undefined;
    },
    { timeoutMs: 30_000 },
  );
  const producer = k.kafka.producer();
  await producer.connect();
  await producer.send({
    topic,
    messages: Array.from({ length: 30 }, (_, i) => ({ key: `dock-${i}`, value: `{"dock_id":${i}}` })),
  });
  await producer.disconnect();
  dir = await mkdtemp(join(tmpdir(), 'spillway-tune-kafka-'));
  sample = join(dir, 'dock-events.csv');
  const rows = ['dock_id,station_id,bikes_available,docks_free,event,at'];
  for (let i = 0; i < 800; i++) {
    const bikes = (i * 11) % 21;
    rows.push(
      `${(i * 7) % 250},district-${i % 9}-st-${i % 40},${bikes},${20 - bikes},${i % 5 ? 'status' : 'rental'},2026-03-02T07:${String(Math.floor(i / 20) % 60).padStart(2, '0')}:00Z`,
    );
  }
  await writeFile(sample, `${rows.join('\n')}\n`);
});

afterAll(async () => {
  await k?.admin.deleteTopics({ topics: [topic], timeout: 10_000 }).catch(() => undefined);
  await k?.drop();
  if (dir) await rm(dir, { recursive: true, force: true });
});

/** Everything the tune might change on the user's topic: its offsets, partitions and topic configs. */
async function observe(admin: Admin, name: string) {
  const offsets = await admin.fetchTopicOffsets(name);
  const { topics } = await admin.fetchTopicMetadata({ topics: [name] });
  const configs = await admin.describeConfigs({
    resources: [{ type: 2 /* ConfigResourceTypes.TOPIC */, name }],
    includeSynonyms: false,
  });
  return {
    offsets: offsets.map((o) => [o.partition, o.low, o.high]).sort(),
    partitions: topics[0]?.partitions.map((p) => [p.partitionId, p.replicas.length]).sort(),
    configs: (configs.resources[0]?.configEntries ?? [])
      .filter((c) => c.configSource === 1 /* TOPIC_CONFIG */)
      .map((c) => `${c.configName}=${c.configValue}`)
      .sort(),
  };
}

/** Scratch topics (`spillway-tune-…`) that exist now, with their shape and message count. */
async function scratchTopics(admin: Admin) {
  const names = (await admin.listTopics()).filter((t) => t.startsWith('spillway-tune-'));
  const out: { name: string; messages: number; shape: Awaited<ReturnType<typeof observe>> }[] = [];
  for (const name of names) {
    const shape = await observe(admin, name).catch(() => undefined);
    if (!shape) continue; // deleted in between
    const messages = shape.offsets.reduce((a, o) => a + Number(o[2]) - Number(o[1]), 0);
    out.push({ name, messages, shape });
  }
  return out;
}

describe('tuning a Kafka producer sink on a scratch topic made like the user’s', () => {
  it('makes the scratch topic with the user’s partitions, replication factor and topic configs, writes the trials there, recommends and validates, deletes it, and never writes the user’s topic', async () => {
    const before = await observe(k.admin, topic);
    expect(before.offsets.reduce((a, o) => a + Number(o[2]), 0)).toBe(30);

    let scratchName: string | undefined;
    // The scratch topic as the test sees it on the broker while the tune runs. An admin of its
    // own: kafkajs keeps asking for the metadata of every topic an admin has looked at, and this
    // one is deleted under it.
    const seen: { messages: number; shape?: Awaited<ReturnType<typeof observe>> } = { messages: 0 };
    const watching = k.kafka.admin();
    await watching.connect();
    let running = true;
    const watcher = (async () => {
      while (running) {
        if (scratchName) {
          const now = (await scratchTopics(watching)).find((t) => t.name === scratchName);
          if (now && now.messages >= seen.messages)
            Object.assign(seen, { messages: now.messages, shape: now.shape });
        }
        await sleep(100);
      }
      await watching.disconnect();
    })();
    const offered: number[] = [];
    let outcome: KafkaTuneOutcome;
    try {
      outcome = await tuneKafka({
        brokers: services().kafkaBrokers,
        topic,
        key: 'dock_id',
        sample,
        // A loose target: the machine running the tests is shared, and the check here is on where
        // the records go, not on how fast the broker is.
        rate: 300,
        p99Ms: 1000,
        trialMs: 500,
        budgetMs: 5000,
        validateMs: 1500,
        maxConcurrency: 2,
        onProgress: (e) => {
          if (e.kind === 'note')
            scratchName ??= /Scratch topic: (spillway-tune-[0-9a-f]{8})/.exec(e.text)?.[1];
          if (e.kind === 'trial') offered.push(e.trial.offered);
        },
      });
    } finally {
      running = false;
      await watcher;
    }
    console.log(
      `kafka store µs/record: ${outcome.trials.map((t) => (t.storeMsPerRecord * 1000).toFixed(1)).join(' ')}; ` +
        `fitted ${outcome.writeCost.fixedMs} ms + ${(outcome.writeCost.perRecordMs * 1000).toFixed(1)} µs/record; ` +
        `recommended ${JSON.stringify(outcome.recommended?.settings)}; validation p99 ${outcome.validation?.trial.p99Ms} ms; ` +
        `scratch topic held ${seen.messages} messages at most`,
    );

    // The user's topic as the broker describes it, and a scratch topic made the same way.
    expect(outcome.topic).toEqual({
      name: topic,
      partitions: PARTITIONS,
      replicationFactor: 1,
      configs: expect.arrayContaining(CONFIGS),
    });
    expect(outcome.scratchTopic).toBe(scratchName);
    expect(seen.shape?.partitions).toEqual(before.partitions);
    expect(seen.shape?.configs).toEqual(before.configs);
    // The trials' messages landed on the scratch topic: at least every record the trials offered
    // (the warm-up and validation runs add theirs), each trial's records durable.
    expect(seen.messages).toBeGreaterThanOrEqual(offered.reduce((a, n) => a + n, 0));

    expect(outcome.records).toMatchObject({ source: 'dock-events.csv', rows: 800 });
    for (const t of outcome.trials) {
      expect(t.durable + t.deadLettered + t.stuck).toBe(t.offered);
      expect(t.deadLettered).toBe(0);
    }
    const meeting = outcome.trials.filter((t) => t.meets);
    expect(meeting.length).toBeGreaterThan(0);
    expect(outcome.validations?.[0]?.trial.settings).toEqual([...meeting].sort(byCost)[0]!.settings);
    expect(outcome.validation?.holds).toBe(true);
    expect(outcome.validation!.trial.durable).toBe(outcome.validation!.trial.offered);

    // The scratch topic is gone; the user's topic holds the same 30 messages and configs.
    expect((await k.admin.listTopics()).includes(outcome.scratchTopic)).toBe(false);
    expect(await observe(k.admin, topic)).toEqual(before);
  });

  it('`spillway tune --topic` deletes the scratch topic when interrupted by Ctrl-C (SIGINT), and exits 130', async () => {
    const before = await observe(k.admin, topic);
    const r = await interruptTune(
      [
        '--to',
        `kafka://${services().kafkaBrokers.join(',')}`,
        '--topic',
        topic,
        '--message-key',
        'dock_id',
        '--sample',
        sample,
      ],
      join(dir, 'int.svg'),
      /Scratch topic: (spillway-tune-[0-9a-f]{8})/,
      async (scratch) => expect((await k.admin.listTopics()).includes(scratch)).toBe(true),
    );
    expect(r.code).toBe(130);
    expect(r.stderr).toContain('interrupted by SIGINT; the scratch topic was deleted');
    expect((await k.admin.listTopics()).includes(r.scratch)).toBe(false);
    expect(await observe(k.admin, topic)).toEqual(before);
  });

  it('refuses a topic the cluster does not have and a message key the sample lacks, naming each, and creates no topic', async () => {
    const base = {
      brokers: services().kafkaBrokers,
      sample,
      p99Ms: 300,
      validateMs: 0,
      handleSignals: false,
    };
    const topicsBefore = (await k.admin.listTopics()).filter((t) => t.startsWith('spillway-tune-'));
    await expect(tuneKafka({ ...base, topic: `${topic}-nope` })).rejects.toMatchObject({
      code: 'SPILLWAY_INVALID_OPTION',
      message: expect.stringContaining(`${topic}-nope`),
    });
    await expect(tuneKafka({ ...base, topic, key: 'dock' })).rejects.toMatchObject({
      code: 'SPILLWAY_INPUT_ERROR',
      message: expect.stringContaining('has no field "dock" (key)'),
    });
    const topicsAfter = (await k.admin.listTopics()).filter((t) => t.startsWith('spillway-tune-'));
    expect(topicsAfter.filter((t) => !topicsBefore.includes(t))).toEqual([]);
  });
});
