// tuneKafka(): picks batch settings for a Kafka producer sink on a scratch topic made like the
// user's topic (its partition count, replication factor and topic configs, read from the broker),
// with the user's records, key, acks and compression, at the user's rate and arrival shape; the
// user's topic is never written. Then it checks the pick with one more run.
import { invalidOption } from '@spillway/core/kit';
import type { Row } from '@spillway/ingest';
import type { Admin } from 'kafkajs';
import { cannotConnect } from './cannot-connect.js';
import { interruption } from './interrupt.js';
import type { ScratchTopic, TopicShape } from './kafka-topic.js';
import { keepOpen } from './keep-open.js';
import type { SearchOutcome } from './search.js';
import { checkSearchOptions, type SearchOptions } from './search-options.js';
import { searchStore } from './store-search.js';
import { planLoad, type TableShape } from './table-load.js';

export type KafkaCompression = 'none' | 'gzip';

export interface KafkaTuneOptions extends SearchOptions {
  /** Bootstrap brokers, `host:port`. */
  brokers: string[];
  /** The user's topic: its partitions, replication factor and topic configs are read, never written. */
  topic: string;
  /** The sample field whose value is each message's key (the default partitioner hashes it). @default no key */
  key?: string;
  /** As `kafkaProducerAdapter({ acks })`. @default -1 */
  acks?: -1 | 0 | 1;
  /** As `kafkaProducerAdapter({ idempotent })`. @default true */
  idempotent?: boolean;
  /** Batch codec (the ones kafkajs carries itself). @default 'none' */
  compression?: KafkaCompression;
  /** A CSV or NDJSON file of the user's records (required); each is sent as its JSON. */
  sample: string;
}

export interface KafkaTuneOutcome extends SearchOutcome {
  store: 'kafka';
  server: string;
  /** The user's topic as read from the broker. */
  topic: TopicShape;
  /** The scratch topic the trials wrote to (deleted afterwards). */
  scratchTopic: string;
  key?: string;
  acks: -1 | 0 | 1;
  idempotent: boolean;
  compression: KafkaCompression;
  records: { source: string; rows: number; fields: string[]; meanValueBytes: number };
  lacks: string[];
  load: { shape: TableShape; rate: number; trialMs: number };
}

function check(o: KafkaTuneOptions) {
  if (!Array.isArray(o.brokers) || o.brokers.length === 0 || !o.brokers.every((b) => /^[^\s:]+:\d+$/.test(b)))
    throw invalidOption('brokers', 'a non-empty list of host:port', o.brokers);
  if (typeof o.topic !== 'string' || o.topic === '')
    throw invalidOption('topic', 'the name of your topic', o.topic);
  if (typeof o.sample !== 'string' || o.sample === '')
    throw invalidOption('sample', 'a CSV or NDJSON file of your records (--sample)', o.sample);
  if (o.acks !== undefined && ![-1, 0, 1].includes(o.acks)) throw invalidOption('acks', '-1, 0 or 1', o.acks);
  if (o.idempotent !== undefined && typeof o.idempotent !== 'boolean')
    throw invalidOption('idempotent', 'a boolean', o.idempotent);
  if (o.idempotent !== false && o.acks !== undefined && o.acks !== -1)
    throw invalidOption('acks', '-1 with an idempotent producer (or idempotent: false)', o.acks);
  if (o.compression !== undefined && o.compression !== 'none' && o.compression !== 'gzip')
    throw invalidOption('compression', "'none' or 'gzip'", o.compression);
  return checkSearchOptions(o);
}

/**
 * Measures batch settings of a Kafka producer sink on a scratch topic made like `topic` (deleted
 * at the end, on an error and on SIGINT / SIGTERM) and recommends the setting that meets the p99
 * target with headroom at the least store time per record.
 */
export async function tuneKafka(o: KafkaTuneOptions): Promise<KafkaTuneOutcome> {
  const search = check(o);
  const started = performance.now();
  const note = (text: string) => o.onProgress?.({ kind: 'note', text });
  const [kafkajs, { kafkaProducerAdapter }, topics, { loadRecords, SampleCycle }] = await Promise.all([
    import('kafkajs'),
    import('@spillway/kafka'),
    import('./kafka-topic.js'),
    import('./record-sample.js'),
  ]);
  const keyField = o.key;
  const messageKey = (r: Row) => String(r[keyField!] ?? '');
  const sample = await loadRecords(
    o.sample,
    keyField === undefined ? [] : [{ field: keyField, option: 'key' }],
    o.timestampColumn,
  );
  const load = planLoad(o, sample.timesMs);
  const acks = o.acks ?? -1;
  const idempotent = o.idempotent ?? true;
  const compression = o.compression ?? 'none';

  const stop = interruption(o, 'the scratch topic was deleted');
  const kafka = new kafkajs.Kafka({
    clientId: 'spillway-tune',
    brokers: o.brokers,
    logLevel: kafkajs.logLevel.NOTHING,
    retry: { retries: 3 },
  });
  const admin: Admin = kafka.admin();
  let scratch: ScratchTopic | undefined;
  let close: (() => Promise<void>) | undefined;
  try {
    await admin.connect().catch((e: unknown) => {
      throw cannotConnect(`the Kafka brokers ${o.brokers.join(',')}`, e);
    });
    const cluster = await admin.describeCluster();
    const server = `Kafka cluster ${cluster.clusterId}, ${cluster.brokers.length} broker(s)`;
    const like = await topics.describeTopic(admin, o.topic);
    stop.halt();
    scratch = await topics.createScratchTopic(admin, like, stop.halt);
    note(
      `Scratch topic: ${scratch.name}, ${like.partitions} partition(s), replication factor ${like.replicationFactor}` +
        `${like.configs.length > 0 ? `, ${like.configs.map((c) => `${c.name}=${c.value}`).join(', ')}` : ''}` +
        ' (deleted at the end, on an error and on Ctrl-C).',
    );
    const producer = kafkaProducerAdapter<Row>({
      kafka,
      topic: scratch.name,
      mapper: (r) => ({ key: keyField === undefined ? null : messageKey(r), value: JSON.stringify(r) }),
      acks,
      idempotent,
      ...(compression === 'gzip' ? { compression: kafkajs.CompressionTypes.GZIP } : {}),
    });
    close = () => producer.close();
    // One producer for every trial: a sink's close() would end it, and a new one per trial would
    // charge its connection to that trial.
    const adapter = keepOpen(producer);
    const cycle = new SampleCycle(sample.rows);
    const outcome = await searchStore({
      options: o,
      search,
      load,
      started,
      stop,
      adapter,
      cycle,
      // A topic is a log: what earlier trials appended does not change the cost of the next append.
      reset: async () => undefined,
      // With batches of one key in flight together, a retried one could overtake a later one:
      // the sink keeps a key's batches in order, as the options printed tell the user to.
      orderingKey: (settings) =>
        keyField !== undefined && settings.concurrency > 1 ? messageKey : undefined,
    });
    const valueBytes = sample.rows.reduce((a, r) => a + Buffer.byteLength(JSON.stringify(r)), 0);
    return {
      store: 'kafka',
      server,
      topic: like,
      scratchTopic: scratch.name,
      ...(keyField !== undefined ? { key: keyField } : {}),
      acks,
      idempotent,
      compression,
      records: {
        source: sample.source,
        rows: sample.rows.length,
        fields: sample.fields,
        meanValueBytes: Math.round(valueBytes / sample.rows.length),
      },
      lacks: [
        "your topic's consumers and the other producers writing to it (their load on the brokers)",
        'your value format: each record is sent as its JSON',
      ],
      ...outcome,
    };
  } finally {
    try {
      await close?.().catch(() => undefined);
      await scratch?.drop();
    } finally {
      await admin.disconnect().catch(() => undefined);
      stop.dispose();
    }
  }
}
