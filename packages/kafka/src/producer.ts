/**
 * The Kafka producer sink adapter: a batch goes out as one `sendBatch` (acks -1 by default), or
 * as a few consecutive ones when it is larger than `maxRequestBytes`, and is durable when they
 * have resolved.
 */
import {
  type Batch,
  type ErrorClass,
  messageOf,
  type PartialWrite,
  type SinkAdapter,
  StoreError,
} from '@spillway/core';
import {
  type ICustomPartitioner,
  type Message,
  type PartitionerArgs,
  Partitioners,
  type Producer,
  type TopicMessages,
} from 'kafkajs';
import { classifyKafkaError, kafkaErrorType } from './classify.js';
import {
  type KafkaOutgoing,
  type KafkaProducerAdapterOptions,
  type ResolvedKafkaProducerOptions,
  resolveKafkaProducerOptions,
} from './producer-options.js';

/**
 * After these, an idempotent producer's sequence numbers no longer match the broker's: kafkajs
 * rolls back the sequence of every partition of a failed request, including partitions the broker
 * did append. Sending on with it risks OUT_OF_ORDER_SEQUENCE_NUMBER or, worse, a new batch taken
 * for a duplicate of an old one and dropped. A new producer (new producer id) starts clean.
 */
const RESET_PRODUCER: ReadonlySet<string> = new Set([
  'MESSAGE_TOO_LARGE',
  'RECORD_LIST_TOO_LARGE',
  'INVALID_RECORD',
  'INVALID_TIMESTAMP',
  'OUT_OF_ORDER_SEQUENCE_NUMBER',
  'DUPLICATE_SEQUENCE_NUMBER',
  'UNKNOWN_PRODUCER_ID',
  'INVALID_PRODUCER_EPOCH',
]);

/**
 * Bytes a record adds to a produce request beyond its key, value and headers: the v2 record's
 * length, attributes, timestamp and offset deltas and lengths (varints). From memory: at most
 * about 20; 24 keeps the estimate on the safe side.
 */
const RECORD_OVERHEAD = 24;

/**
 * The partition the partitioner placed a message on, kept on the message itself: kafkajs hands
 * the partitioner the very object given to `sendBatch`, on each of its retries too, and encodes
 * only the fields it knows. (A WeakMap from message to placement cost a hash insert and two
 * look-ups per message.)
 */
const PLACED: unique symbol = Symbol('spillway.placed');

/** A message as this adapter sends it: kafkajs' fields, and where it was placed once it was. */
interface PlacedMessage extends Message {
  [PLACED]?: number | undefined;
}

interface Chunk {
  /** Batch indexes of the chunk's records, and beside each the topic and message it went out as. */
  indexes: number[];
  topics: string[];
  messages: PlacedMessage[];
  bytes: number;
  byTopic: Map<string, Message[]>;
}

function byteLength(v: Buffer | string | null | undefined): number {
  if (v === null || v === undefined) return 0;
  return typeof v === 'string' ? Buffer.byteLength(v) : v.length;
}

function headerBytes(headers: KafkaOutgoing['headers']): number {
  if (!headers) return 0;
  let n = 0;
  for (const [k, v] of Object.entries(headers)) {
    n += Buffer.byteLength(k);
    if (Array.isArray(v)) for (const x of v) n += byteLength(x);
    else n += byteLength(v as Buffer | string | undefined);
  }
  return n;
}

export class KafkaProducerAdapter<T> implements SinkAdapter<T> {
  readonly kind = 'kafka';
  private readonly o: ResolvedKafkaProducerOptions<T>;
  private producer: Producer | undefined;
  private connecting: Promise<Producer> | undefined;
  private closed = false;
  /**
   * Messages the partitioner placed on an explicit partition the topic's metadata does not list
   * (rare: a WeakSet costs nothing on the common path). The placement itself is on the message.
   */
  private readonly absent = new WeakSet<Message>();
  /** Producers created so far; more than one means a producer was replaced after a failure. */
  producersCreated = 0;

  constructor(options: KafkaProducerAdapterOptions<T>) {
    this.o = resolveKafkaProducerOptions(options);
  }

  /** The connected producer, created on first use and after a reset. */
  private connected(): Promise<Producer> {
    if (this.producer) return Promise.resolve(this.producer);
    this.connecting ??= (async () => {
      const producer = this.o.kafka.producer({
        ...this.o.producer,
        createPartitioner: this.placing(this.o.producer.createPartitioner ?? Partitioners.DefaultPartitioner),
      });
      this.producersCreated++;
      try {
        await producer.connect();
      } catch (error) {
        await producer.disconnect().catch(() => undefined);
        throw error;
      }
      this.producer = producer;
      return producer;
    })().finally(() => {
      this.connecting = undefined;
    });
    return this.connecting;
  }

  /**
   * The user's partitioner (kafkajs' default, murmur2 of the key as the Java client, unless one
   * was given), recording where it put each message. kafkajs calls the partitioner again on each
   * of its own retries inside one `sendBatch`: a message keeps its first placement, so that a
   * retry cannot move an unkeyed record to another partition (written twice) while the check
   * looks for it under the last one.
   */
  private placing(create: ICustomPartitioner): ICustomPartitioner {
    const absent = this.absent;
    return () => {
      const choose = create();
      return (args: PartitionerArgs): number => {
        const message = args.message as PlacedMessage;
        const before = message[PLACED];
        if (before !== undefined) return before;
        const partition = choose(args);
        if (
          message.partition !== undefined &&
          !args.partitionMetadata.some((p) => p.partitionId === partition)
        )
          absent.add(message);
        message[PLACED] = partition;
        return partition;
      };
    };
  }

  /** Drops a producer whose state cannot be trusted; the next write creates a new one. */
  private async reset(producer: Producer): Promise<void> {
    if (this.producer !== producer) return;
    this.producer = undefined;
    await producer.disconnect().catch(() => undefined);
  }

  // biome-ignore lint/suspicious/noConfusingVoidType: matches SinkAdapter.write
  async write(batch: Batch<T>): Promise<void | PartialWrite> {
    const { mapper, maxRecordBytes, maxRequestBytes } = this.o;
    const rejected: Array<{ index: number; error: unknown }> = [];
    // Consecutive chunks of at most maxRequestBytes (estimated), each one sendBatch.
    const chunks: Chunk[] = [];
    let chunk: Chunk | undefined;
    for (let i = 0; i < batch.records.length; i++) {
      let out: KafkaOutgoing;
      try {
        out = mapper(batch.records[i] as T, batch.metas[i]);
        if (typeof out !== 'object' || out === null || !('value' in out)) {
          throw new TypeError('the mapper must return an object with a `value`');
        }
      } catch (error) {
        rejected.push({
          index: i,
          error: new StoreError(`Kafka mapper failed for a record: ${messageOf(error)}`, {
            cause: error,
            details: { stage: 'mapping' },
          }),
        });
        continue;
      }
      const topic = out.topic ?? this.o.topic;
      if (topic === undefined) {
        rejected.push({
          index: i,
          error: new StoreError('Kafka record has no topic: set `topic` or return one from the mapper', {
            details: { stage: 'mapping' },
          }),
        });
        continue;
      }
      const size = byteLength(out.key) + byteLength(out.value) + headerBytes(out.headers);
      if (size > maxRecordBytes) {
        rejected.push({
          index: i,
          error: new StoreError(
            `Kafka record of ${size} bytes exceeds maxRecordBytes (${maxRecordBytes}); not sent`,
            {
              driverCode: 'MESSAGE_TOO_LARGE',
              details: { topic, bytes: size, maxRecordBytes },
            },
          ),
        });
        continue;
      }
      const message: PlacedMessage = { value: out.value };
      if (out.key !== undefined) message.key = out.key;
      if (out.headers !== undefined) message.headers = out.headers;
      if (out.partition !== undefined) message.partition = out.partition;
      if (out.timestamp !== undefined) message.timestamp = String(out.timestamp);
      const bytes = size + RECORD_OVERHEAD;
      if (chunk === undefined || (chunk.bytes + bytes > maxRequestBytes && chunk.indexes.length > 0)) {
        chunks.push((chunk = { indexes: [], topics: [], messages: [], bytes: 0, byTopic: new Map() }));
      }
      chunk.indexes.push(i);
      chunk.topics.push(topic);
      chunk.messages.push(message);
      chunk.bytes += bytes;
      let list = chunk.byTopic.get(topic);
      if (!list) chunk.byTopic.set(topic, (list = []));
      list.push(message);
    }

    if (chunks.length > 0) {
      const producer = await this.connected().catch((error: unknown) => {
        throw this.wrap(error, batch.records.length);
      });
      for (let k = 0; k < chunks.length; k++) {
        const c = chunks[k]!;
        try {
          const written = await producer.sendBatch({
            topicMessages: [...c.byTopic].map(([topic, messages]): TopicMessages => ({ topic, messages })),
            acks: this.o.acks,
            timeout: this.o.ackTimeoutMs,
            ...(this.o.compression === undefined ? {} : { compression: this.o.compression }),
          });
          if (this.o.acks !== 0) this.checkAcknowledged(c, written, rejected);
        } catch (error) {
          const type = kafkaErrorType(error);
          if (this.o.idempotent && type !== undefined && RESET_PRODUCER.has(type)) await this.reset(producer);
          const wrapped = this.wrap(error, c.indexes.length);
          // Nothing of this batch is known to have landed: the engine retries or bisects it whole.
          if (k === 0) throw wrapped;
          const cls = this.classify(wrapped);
          if (cls === 'fatal') throw wrapped;
          // The earlier chunks are durable: report only the rest as not written. A refused chunk
          // comes back as a retry, so that the next attempt starts with it and can be bisected.
          const resend =
            cls === 'retry'
              ? wrapped
              : new StoreError(
                  `Kafka sendBatch refused a later part of a batch; sending it again on its own: ${wrapped.message}`,
                  {
                    cause: wrapped,
                    driverCode: wrapped.driverCode,
                    details: { stage: 'resend' },
                  },
                );
          for (let j = k; j < chunks.length; j++)
            for (const index of chunks[j]!.indexes) rejected.push({ index, error: resend });
          break;
        }
      }
    }
    return rejected.length === 0 ? undefined : { rejected };
  }

  /**
   * `sendBatch` can resolve without having written some partitions, and says nothing:
   * - kafkajs skips messages whose explicit partition the topic does not have;
   * - kafkajs resends a failed produce request only to brokers that have not answered in the same
   *   call (`producer/sendMessages.js`, 2.2.4): when a dead leader's partition moves to a broker
   *   that already answered, that partition's records are sent to nobody.
   * Every partition written appears in the produce response, so the records of a partition
   * missing from it are reported as not written: UNKNOWN_TOPIC_OR_PARTITION for a partition that
   * does not exist, otherwise a retryable error, and the engine writes only those again.
   */
  private checkAcknowledged(
    chunk: Chunk,
    written: ReadonlyArray<{ topicName: string; partition: number }>,
    rejected: Array<{ index: number; error: unknown }>,
  ): void {
    const landed = new Map<string, Set<number>>();
    for (const w of written) {
      let set = landed.get(w.topicName);
      if (!set) landed.set(w.topicName, (set = new Set()));
      set.add(w.partition);
    }
    // `topic\u0000partition` → the indexes of records placed there and not acknowledged.
    let missing:
      | Map<string, { topic: string; partition: number | undefined; exists: boolean; indexes: number[] }>
      | undefined;
    // The topic's set of the last record: a batch's records mostly share one topic.
    let lastTopic: string | undefined;
    let lastSet: Set<number> | undefined;
    for (let j = 0; j < chunk.indexes.length; j++) {
      const topic = chunk.topics[j]!;
      const message = chunk.messages[j]!;
      const partition = message[PLACED];
      if (topic !== lastTopic) {
        lastTopic = topic;
        lastSet = landed.get(topic);
      }
      if (partition !== undefined && lastSet?.has(partition)) continue;
      const where = `${topic}\u0000${partition ?? ''}`;
      missing ??= new Map();
      let entry = missing.get(where);
      if (!entry)
        missing.set(where, (entry = { topic, partition, exists: !this.absent.has(message), indexes: [] }));
      entry.indexes.push(chunk.indexes[j]!);
    }
    if (missing === undefined) return;
    for (const { topic, partition, exists, indexes } of missing.values()) {
      const error =
        partition !== undefined && !exists
          ? new StoreError(
              `Kafka topic "${topic}" has no partition ${partition}: ${indexes.length} record(s) not written`,
              {
                driverCode: 'UNKNOWN_TOPIC_OR_PARTITION',
                details: { topic, partition, records: indexes.length },
              },
            )
          : new StoreError(
              `Kafka produce response has no acknowledgement for topic "${topic}"` +
                `${partition === undefined ? '' : ` partition ${partition}`} (its leader changed during the send): ` +
                `${indexes.length} record(s) not known to be written; sending them again`,
              {
                details: {
                  stage: 'unacknowledged',
                  topic,
                  ...(partition === undefined ? {} : { partition }),
                  records: indexes.length,
                },
              },
            );
      for (const index of indexes) rejected.push({ index, error });
    }
  }

  private wrap(error: unknown, records: number): StoreError {
    const type = kafkaErrorType(error);
    return new StoreError(`Kafka sendBatch of ${records} record(s) failed: ${messageOf(error)}`, {
      cause: error,
      driverCode: type,
      details: { records },
    });
  }

  classify(error: unknown): ErrorClass {
    if (error instanceof StoreError && error.details.stage === 'mapping') return 'split';
    if (error instanceof StoreError && error.details.stage === 'resend') return 'retry';
    if (error instanceof StoreError && error.details.stage === 'unacknowledged') return 'retry';
    if (error instanceof StoreError && error.cause === undefined && error.driverCode === 'MESSAGE_TOO_LARGE')
      return 'split';
    return classifyKafkaError(error, { unknownTopic: this.o.unknownTopic });
  }

  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    const producer = this.producer ?? (await this.connecting?.catch(() => undefined));
    this.producer = undefined;
    await producer?.disconnect();
  }
}

/** Creates the Kafka producer adapter; pass it to `new Sink(adapter, options)`. */
export function kafkaProducerAdapter<T>(options: KafkaProducerAdapterOptions<T>): KafkaProducerAdapter<T> {
  return new KafkaProducerAdapter(options);
}
