// The user's Kafka topic, read from the broker (partition count, replication factor, the configs
// set on the topic itself), and the scratch topic a Kafka tune writes to instead: created with the
// same, deleted at the end. The user's topic is only described, never produced to.
import { randomBytes } from 'node:crypto';
import { invalidOption } from '@spillway/core/kit';
import kafkajs, { type Admin } from 'kafkajs';
import { inputError } from './sample-file.js';

export interface TopicShape {
  name: string;
  partitions: number;
  replicationFactor: number;
  /** Configs set on the topic itself (not broker defaults), copied to the scratch topic. */
  configs: { name: string; value: string }[];
}

/** Reads the shape of `topic`; throws a TypeError naming it when the cluster has no such topic. */
export async function describeTopic(admin: Admin, topic: string): Promise<TopicShape> {
  const names = await admin.listTopics();
  if (!names.includes(topic))
    throw invalidOption('topic', 'an existing topic of the cluster (it is read, never written)', topic);
  const { topics } = await admin.fetchTopicMetadata({ topics: [topic] });
  const partitions = topics[0]?.partitions ?? [];
  const described = await admin.describeConfigs({
    resources: [{ type: kafkajs.ConfigResourceTypes.TOPIC, name: topic }],
    includeSynonyms: false,
  });
  const configs = (described.resources[0]?.configEntries ?? [])
    .filter(
      (c) => c.configSource === kafkajs.ConfigSource.TOPIC_CONFIG && !c.isSensitive && c.configValue !== null,
    )
    .map((c) => ({ name: c.configName, value: c.configValue }));
  return {
    name: topic,
    partitions: partitions.length,
    replicationFactor: Math.max(0, ...partitions.map((p) => p.replicas.length)),
    configs,
  };
}

export interface ScratchTopic {
  name: string;
  /** Deletes the topic; safe to call twice. */
  drop(): Promise<void>;
}

/** A fresh scratch topic name: `spillway-tune-` and 8 hex digits. */
export function scratchTopicName(): string {
  return `spillway-tune-${randomBytes(4).toString('hex')}`;
}

/**
 * Creates the scratch topic with the user's topic's partitions, replication factor and topic
 * configs, and waits until every partition has a leader (a loaded broker answers
 * UNKNOWN_TOPIC_OR_PARTITION for a moment after the creation).
 */
export async function createScratchTopic(
  admin: Admin,
  like: TopicShape,
  halt: () => void,
  name = scratchTopicName(),
): Promise<ScratchTopic> {
  let dropped = false;
  const drop = async () => {
    if (dropped) return;
    dropped = true;
    await admin.deleteTopics({ topics: [name], timeout: 30_000 });
  };
  try {
    await admin.createTopics({
      topics: [
        {
          topic: name,
          numPartitions: like.partitions,
          replicationFactor: like.replicationFactor,
          configEntries: like.configs,
        },
      ],
      waitForLeaders: false,
    });
  } catch (error) {
    const e = error as Error & { errors?: { type?: string; message?: string }[] };
    const why = e.errors?.map((x) => `${x.type}: ${x.message}`).join('; ') ?? e.message;
    throw inputError(
      `Cannot create the scratch topic like ${like.name} (${like.partitions} partitions, replication factor ${like.replicationFactor}): ${why}`,
      { topic: like.name },
    );
  }
  try {
    const deadline = Date.now() + 60_000;
    for (;;) {
      halt();
      const ready = await admin
        .fetchTopicMetadata({ topics: [name] })
        .then(({ topics }) => {
          const parts = topics[0]?.partitions ?? [];
          return parts.length === like.partitions && parts.every((p) => p.leader >= 0);
        })
        .catch(() => false);
      if (ready) break;
      if (Date.now() > deadline)
        throw inputError(`The scratch topic ${name} has no leader for every partition after 60 s`, {
          topic: name,
        });
      await new Promise((resolve) => setTimeout(resolve, 100));
    }
  } catch (error) {
    await drop().catch(() => undefined);
    throw error;
  }
  return { name, drop };
}
