/**
 * Options of the transactional Kafka sink adapter (`kafkaTransactionalAdapter()`), validated in
 * the constructor.
 */
import type { RecordMeta } from '@spillway/core';
import { countOption, invalidOption, knownOptions, positiveOption } from '@spillway/core/kit';
import type { CompressionTypes, Kafka, ProducerConfig } from 'kafkajs';
import type { KafkaOutgoing } from './producer-options.js';

export interface KafkaTransactionalAdapterOptions<T> {
  /**
   * The kafkajs client. The adapter creates one transactional producer per source partition from
   * it, and an admin client that reads the stored offsets.
   * @example new Kafka({ clientId: 'tandem-enricher', brokers: ['127.0.0.1:9092'] })
   */
  kafka: Kafka;
  /**
   * The consumer group of the `KafkaBridge` that feeds this sink (its `groupId`). It names the
   * transactional ids, and the bridge reads the stored offsets under it.
   * @example 'dock-enricher'
   */
  group: string;
  /**
   * First part of every transactional id: `<prefix>-<group>-<topic>-<partition>` for each source
   * partition. Give each transactional sink of a group its own prefix (two sinks sharing ids would
   * fence each other); keep it the same across restarts and deploys (a new prefix cannot fence a
   * process still running with the old one).
   * @default 'spillway'
   * @example 'tandem-enriched'
   */
  transactionalIdPrefix?: string;
  /**
   * The consumer group the stored offsets are committed under, inside each transaction
   * (`sendOffsets`). It is not the bridge's own group: the bridge keeps committing that one for lag
   * tools, and its commits must not overwrite the stored offsets.
   * @default `${transactionalIdPrefix}-${group}`
   * @example 'tandem-enriched-dock-enricher'
   */
  offsetsGroup?: string;
  /**
   * Topic written to, unless the mapper names one per record.
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
   * Milliseconds the broker lets a transaction stay open before it aborts it (`transactionTimeout`
   * of the producer). Must not exceed the broker's `transaction.max.timeout.ms` (15 minutes by
   * default). A read_committed consumer waits at most this long behind a transaction whose
   * process died, unless a restart fences it sooner.
   * @default 60000
   * @example 30_000
   */
  transactionTimeoutMs?: number;
  /**
   * Milliseconds the broker may take to gather the acknowledgements (`timeout` of each produce
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
   * dead-letter it (driver code MESSAGE_TOO_LARGE). `Infinity` turns the check off.
   * @default 1048576
   * @example 8_388_608
   */
  maxRecordBytes?: number;
  /**
   * More kafkajs producer settings (`retry`, `createPartitioner`, `metadataMaxAge`). The adapter
   * sets `transactionalId`, `idempotent` and `transactionTimeout` itself.
   * @default { retry: { retries: 5, initialRetryTime: 25 }, allowAutoTopicCreation: false }
   * @example { retry: { retries: 8, initialRetryTime: 50 } }
   */
  producer?: Omit<
    ProducerConfig,
    'idempotent' | 'maxInFlightRequests' | 'transactionalId' | 'transactionTimeout'
  >;
}

export interface ResolvedKafkaTransactionalOptions<T> {
  kafka: Kafka;
  group: string;
  transactionalIdPrefix: string;
  offsetsGroup: string;
  topic: string | undefined;
  mapper: (record: T, meta: RecordMeta | undefined) => KafkaOutgoing;
  transactionTimeoutMs: number;
  ackTimeoutMs: number;
  compression: CompressionTypes | undefined;
  maxRecordBytes: number;
  /** The user's producer settings with the adapter's defaults (without the transactional ones). */
  producer: ProducerConfig;
}

const KNOWN = new Set([
  'kafka',
  'group',
  'transactionalIdPrefix',
  'offsetsGroup',
  'topic',
  'mapper',
  'transactionTimeoutMs',
  'ackTimeoutMs',
  'compression',
  'maxRecordBytes',
  'producer',
]);

/** Settings the adapter owns: a user value for them would be silently replaced, so it is refused. */
const OWNED = ['transactionalId', 'idempotent', 'maxInFlightRequests', 'transactionTimeout'] as const;

function nonEmpty(name: string, value: unknown): string {
  if (typeof value !== 'string' || value.length === 0) throw invalidOption(name, 'a non-empty string', value);
  return value;
}

export function resolveKafkaTransactionalOptions<T>(
  options: KafkaTransactionalAdapterOptions<T>,
): ResolvedKafkaTransactionalOptions<T> {
  if (typeof options !== 'object' || options === null) throw invalidOption('options', 'an object', options);
  knownOptions(options, KNOWN);
  const { kafka, mapper } = options;
  if (
    typeof kafka !== 'object' ||
    kafka === null ||
    typeof (kafka as { producer?: unknown }).producer !== 'function' ||
    typeof (kafka as { admin?: unknown }).admin !== 'function'
  ) {
    throw invalidOption('kafka', 'a kafkajs Kafka client', kafka);
  }
  const group = nonEmpty('group', options.group);
  const transactionalIdPrefix = nonEmpty(
    'transactionalIdPrefix',
    options.transactionalIdPrefix ?? 'spillway',
  );
  const offsetsGroup = nonEmpty('offsetsGroup', options.offsetsGroup ?? `${transactionalIdPrefix}-${group}`);
  if (offsetsGroup === group)
    throw invalidOption(
      'offsetsGroup',
      `a group other than the bridge's own ("${group}"): the bridge's commits would overwrite the stored offsets`,
      offsetsGroup,
    );
  const topic = options.topic === undefined ? undefined : nonEmpty('topic', options.topic);
  if (typeof mapper !== 'function')
    throw invalidOption(
      'mapper',
      'a function (record, meta) => { value, key?, headers?, partition?, timestamp?, topic? }',
      mapper,
    );
  // Source: Apache Kafka documentation, broker configs: transaction.max.timeout.ms defaults to
  // 900000; the broker refuses a longer producer timeout (INVALID_TRANSACTION_TIMEOUT).
  const transactionTimeoutMs = positiveOption(
    'transactionTimeoutMs',
    options.transactionTimeoutMs,
    60_000,
    true,
  );
  const ackTimeoutMs = countOption('ackTimeoutMs', options.ackTimeoutMs, 30_000);
  const maxRecordBytes = countOption('maxRecordBytes', options.maxRecordBytes, 1_048_576, {
    allowInfinity: true,
  });
  const extra = options.producer ?? {};
  if (typeof extra !== 'object' || extra === null)
    throw invalidOption('producer', 'an object of kafkajs producer settings', extra);
  for (const key of OWNED) {
    if (key in extra)
      throw invalidOption(
        `producer.${key}`,
        'absent (the transactional sink sets it)',
        (extra as never)[key],
      );
  }
  const producer: ProducerConfig = {
    allowAutoTopicCreation: false,
    ...extra,
    // A short first retry: the next transaction's first request often meets CONCURRENT_TRANSACTIONS
    // while the last one's markers are written, and kafkajs' default first wait is 300 ms.
    retry: { retries: 5, initialRetryTime: 25, ...extra.retry },
  };
  return {
    kafka,
    group,
    transactionalIdPrefix,
    offsetsGroup,
    topic,
    mapper,
    transactionTimeoutMs,
    ackTimeoutMs,
    compression: options.compression,
    maxRecordBytes,
    producer,
  };
}
