/**
 * Options of the Kafka producer sink adapter (`kafkaProducerAdapter()`), validated in the
 * constructor.
 */
import type { RecordMeta } from '@spillway/core';
import { booleanOption, countOption, invalidOption, knownOptions } from '@spillway/core/kit';
import type { CompressionTypes, IHeaders, Kafka, ProducerConfig } from 'kafkajs';

/** What one record becomes on the topic. */
export interface KafkaOutgoing {
  /** The record's bytes; `null` writes a tombstone (deletes the key on a compacted topic). */
  value: Buffer | string | null;
  /** Records of one key go to one partition (default partitioner) and keep their order. */
  key?: Buffer | string | null;
  headers?: IHeaders;
  /** An explicit partition; otherwise the producer's partitioner picks one from the key. */
  partition?: number;
  /** Event time, ms since the epoch (sent as the record's CreateTime). */
  timestamp?: number;
  /** Overrides the adapter's `topic` for this record. */
  topic?: string;
}

export interface KafkaProducerAdapterOptions<T> {
  /**
   * The kafkajs client. The adapter creates its own producer from it (and creates a new one when
   * an idempotent producer's sequence state can no longer be trusted).
   * @example new Kafka({ clientId: 'tandem-enricher', brokers: ['127.0.0.1:9092'] })
   */
  kafka: Kafka;
  /**
   * Topic written to, unless the mapper names one per record. Required when the mapper never does.
   * @default undefined
   * @example 'tandem.dock-events.enriched'
   */
  topic?: string;
  /**
   * Record → Kafka message: value, key, headers, partition, timestamp, topic.
   * @example (e) => ({ key: e.dockId, value: JSON.stringify(e), timestamp: e.at })
   */
  mapper: (record: T, meta: RecordMeta | undefined) => KafkaOutgoing;
  /**
   * Acknowledgements the broker waits for: -1 (all in-sync replicas), 1 (leader), 0 (none: a
   * write is then "durable" when sent, which is not durable at all). Idempotence needs -1.
   * @default -1
   * @example 1
   */
  acks?: -1 | 0 | 1;
  /**
   * Use kafkajs' idempotent producer: a producer id and per-partition sequence numbers let the
   * broker drop a retried request it already appended, so a retry after a lost reply writes no
   * duplicate and records of one partition keep their order. Off, the producer sends at most one
   * request per broker at a time (`maxInFlightRequests: 1`) to keep the order.
   * @default true
   * @example false
   */
  idempotent?: boolean;
  /**
   * Milliseconds the broker may take to gather the acknowledgements (`timeout` of the produce
   * request).
   * @default 30000
   * @example 10000
   */
  ackTimeoutMs?: number;
  /**
   * Compression codec of each batch.
   * @default CompressionTypes.None
   * @example CompressionTypes.GZIP
   */
  compression?: CompressionTypes;
  /**
   * Refuse a record whose key + value + headers exceed this many bytes before sending it, and
   * dead-letter it (driver code MESSAGE_TOO_LARGE), as the Java producer does with its
   * `max.request.size` (1 MiB by default). `Infinity` turns the check off: the broker then refuses
   * the record (its `message.max.bytes`, 1 MiB + 12 by default), the whole request fails, the batch
   * is bisected to find the record, and records of the request's other partitions, which the
   * broker did append, are written again at each step (duplicates).
   * @default 1048576
   * @example 8_388_608 (a topic with max.message.bytes raised to 8 MiB)
   */
  maxRecordBytes?: number;
  /**
   * Upper bound on the estimated bytes of one `sendBatch` call. kafkajs sends all the messages
   * of one partition in a call as one record batch, and the broker refuses a record batch over
   * its `message.max.bytes` (Source: Apache Kafka documentation, broker configs: "the largest
   * record batch size allowed"), so a batch above this bound goes out as several consecutive
   * `sendBatch` calls. Raise it with the broker's limit.
   * @default 1048576
   * @example 8_388_608
   */
  maxRequestBytes?: number;
  /**
   * How an unknown topic reads after kafkajs' own retries: with auto-creation off, `fatal`.
   * @default 'fatal'
   * @example 'retry'
   */
  unknownTopic?: 'fatal' | 'retry';
  /**
   * More kafkajs producer settings (`retry`, `createPartitioner`, `metadataMaxAge`,
   * `allowAutoTopicCreation`). `idempotent` and `maxInFlightRequests` are set by the adapter.
   * @default { retry: { retries: 5 }, allowAutoTopicCreation: false }
   * @example { retry: { retries: 3, initialRetryTime: 200 }, createPartitioner: Partitioners.DefaultPartitioner }
   */
  producer?: Omit<
    ProducerConfig,
    'idempotent' | 'maxInFlightRequests' | 'transactionalId' | 'transactionTimeout'
  >;
}

export interface ResolvedKafkaProducerOptions<T> {
  kafka: Kafka;
  topic: string | undefined;
  mapper: (record: T, meta: RecordMeta | undefined) => KafkaOutgoing;
  acks: -1 | 0 | 1;
  idempotent: boolean;
  ackTimeoutMs: number;
  compression: CompressionTypes | undefined;
  maxRecordBytes: number;
  maxRequestBytes: number;
  unknownTopic: 'fatal' | 'retry';
  producer: ProducerConfig;
}

const KNOWN = new Set([
  'kafka',
  'topic',
  'mapper',
  'acks',
  'idempotent',
  'ackTimeoutMs',
  'compression',
  'maxRecordBytes',
  'maxRequestBytes',
  'unknownTopic',
  'producer',
]);

export function resolveKafkaProducerOptions<T>(
  options: KafkaProducerAdapterOptions<T>,
): ResolvedKafkaProducerOptions<T> {
  if (typeof options !== 'object' || options === null) throw invalidOption('options', 'an object', options);
  knownOptions(options, KNOWN);
  const { kafka, topic, mapper } = options;
  if (
    typeof kafka !== 'object' ||
    kafka === null ||
    typeof (kafka as { producer?: unknown }).producer !== 'function'
  ) {
    throw invalidOption('kafka', 'a kafkajs Kafka client', kafka);
  }
  if (topic !== undefined && (typeof topic !== 'string' || topic.length === 0))
    throw invalidOption('topic', 'a non-empty string', topic);
  if (typeof mapper !== 'function')
    throw invalidOption(
      'mapper',
      'a function (record, meta) => { value, key?, headers?, partition?, timestamp?, topic? }',
      mapper,
    );
  const idempotent = booleanOption('idempotent', options.idempotent, true);
  const acks = options.acks ?? -1;
  if (acks !== -1 && acks !== 0 && acks !== 1) throw invalidOption('acks', '-1, 0 or 1', acks);
  if (idempotent && acks !== -1)
    throw invalidOption(
      'acks',
      '-1 with `idempotent: true` (the idempotent producer needs every in-sync replica)',
      acks,
    );
  const ackTimeoutMs = countOption('ackTimeoutMs', options.ackTimeoutMs, 30_000);
  const maxRecordBytes = countOption('maxRecordBytes', options.maxRecordBytes, 1_048_576, {
    allowInfinity: true,
  });
  const maxRequestBytes = countOption('maxRequestBytes', options.maxRequestBytes, 1_048_576, {
    allowInfinity: true,
  });
  const unknownTopic = options.unknownTopic ?? 'fatal';
  if (unknownTopic !== 'fatal' && unknownTopic !== 'retry')
    throw invalidOption('unknownTopic', "'fatal' or 'retry'", unknownTopic);
  const extra = options.producer ?? {};
  if (typeof extra !== 'object' || extra === null)
    throw invalidOption('producer', 'an object of kafkajs producer settings', extra);
  const producer: ProducerConfig = {
    retry: { retries: 5 },
    allowAutoTopicCreation: false,
    ...extra,
    idempotent,
    // Idempotent: kafkajs holds a per-broker lock, one request in flight, sequence-checked.
    // Not idempotent: one request in flight per broker so a retried request cannot overtake.
    ...(idempotent ? {} : { maxInFlightRequests: 1 }),
  };
  return {
    kafka,
    topic,
    mapper,
    acks,
    idempotent,
    ackTimeoutMs,
    compression: options.compression,
    maxRecordBytes,
    maxRequestBytes,
    unknownTopic,
    producer,
  };
}
