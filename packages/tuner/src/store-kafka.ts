import { kafkaProducerAdapter } from '@spillway/kafka';
import { Kafka, logLevel } from 'kafkajs';
import type { DockStatus } from './records.js';
import type { OpenedStore, StoreSpec } from './store-spec.js';

const PARTITIONS = 4;

/** Enriched dock events to a topic of the cell's own, one Kafka partition per load partition. */
export async function openKafka(spec: StoreSpec, cellId: string): Promise<OpenedStore> {
  if (!spec.brokers || spec.brokers.length === 0)
    throw new TypeError('Expected `brokers` of the kafka store to be a non-empty list of host:port');
  const kafka = new Kafka({
    clientId: `spillway-bench-${process.pid}`,
    brokers: spec.brokers,
    logLevel: logLevel.NOTHING,
  });
  const admin = kafka.admin();
  await admin.connect();
  const topic = `spillway-bench-${cellId}`.replace(/[^a-zA-Z0-9._-]/g, '_').slice(0, 200);
  await admin.createTopics({
    topics: [{ topic, numPartitions: PARTITIONS, replicationFactor: 1 }],
    waitForLeaders: true,
  });
  const adapter = kafkaProducerAdapter<DockStatus>({
    kafka,
    topic,
    mapper: (r, meta) => ({
      key: String(r.dockId),
      value: JSON.stringify(r),
      partition: Number(meta?.partition ?? 0) % PARTITIONS,
    }),
  });
  return {
    adapter,
    async dispose() {
      await adapter.close?.().catch(() => undefined);
      await admin.deleteTopics({ topics: [topic], timeout: 10_000 }).catch(() => undefined);
      await admin.disconnect();
    },
  };
}
