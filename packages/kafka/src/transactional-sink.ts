/**
 * The transactional Kafka sink adapter: exactly-once from a `KafkaBridge` into Kafka topics. The
 * records of each source partition in a batch go out in one Kafka transaction of that partition's
 * own producer, together with the partition's next offset to read (`sendOffsets` into the offsets
 * group); a read_committed consumer of the output sees them once or, if the transaction aborts,
 * not at all. On assignment the bridge asks `storedOffsets()`, which fences every former owner of
 * the partitions first, then reads what they stored.
 */
import {
  type Batch,
  type ErrorClass,
  messageOf,
  type PartialWrite,
  type RecordMeta,
  type SinkAdapter,
  StoreError,
} from '@spillway/core';
import { invalidOption } from '@spillway/core/kit';
import {
  type Admin,
  type Message,
  type PartitionerArgs,
  Partitioners,
  type PartitionMetadata,
} from 'kafkajs';
import { classifyKafkaError, kafkaErrorType } from './classify.js';
import type { KafkaOutgoing } from './producer-options.js';
import { StableOffsetReader } from './stable-offsets.js';
import { reserveIds, transactionalIdOf } from './transactional-ids.js';
import {
  type KafkaTransactionalAdapterOptions,
  type ResolvedKafkaTransactionalOptions,
  resolveKafkaTransactionalOptions,
} from './transactional-options.js';
import {
  type OutputPartition,
  SourcePartition,
  type TransactionCounters,
} from './transactional-partition.js';

export interface KafkaTransactionalAdapterStats extends TransactionCounters {
  /**
   * Records not sent because the stored offset showed them written already (a replay), or because
   * the same batch holds their source message once more (a bridge fetched it again after a
   * rebalance while the first copy still waited in the sink): each source message goes out once.
   */
  skippedStored: number;
  /** Readings of a stored offset the broker called unstable (a transaction's offsets not yet applied). */
  unstableReads: number;
}

/** Kafka errors of transactions that a new producer (a new fence) gets past. */
const TRANSACTION_RETRY: ReadonlySet<string> = new Set([
  'INVALID_TXN_STATE',
  'TRANSACTION_COORDINATOR_FENCED',
  'CONCURRENT_TRANSACTIONS',
  'UNSTABLE_OFFSET_COMMIT',
]);

/** Between readings of a stored offset the broker calls unstable, ms, and the most readings. */
const UNSTABLE_WAIT_MS = 100;
const MAX_UNSTABLE_READS = 300;

/**
 * Without require_stable: between two readings of a stored offset, ms, and the most readings
 * (common practice, no source).
 */
const SETTLE_MS = 250;
const MAX_SETTLE_READS = 8;

/** How long the partition list of an output topic is used before it is read again, ms. */
const DEFAULT_METADATA_MAX_AGE_MS = 300_000;

interface Source {
  topic: string;
  partition: number;
  offset: bigint;
}

/** Where a record came from, or undefined for a record not taken by a Kafka bridge. */
function sourceOf(meta: RecordMeta | undefined): Source | undefined {
  if (meta === undefined || typeof meta.topic !== 'string' || meta.offset === undefined) return undefined;
  const partition = Number(meta.partition);
  if (!Number.isInteger(partition) || partition < 0) return undefined;
  try {
    return { topic: meta.topic, partition, offset: BigInt(meta.offset) };
  } catch {
    return undefined;
  }
}

function byteLength(v: Buffer | string | null | undefined): number {
  if (v === null || v === undefined) return 0;
  return typeof v === 'string' ? Buffer.byteLength(v) : v.length;
}

function recordBytes(out: KafkaOutgoing): number {
  let n = byteLength(out.key) + byteLength(out.value);
  for (const [k, v] of Object.entries(out.headers ?? {})) {
    n += Buffer.byteLength(k);
    if (Array.isArray(v)) for (const x of v) n += byteLength(x);
    else n += byteLength(v as Buffer | string | undefined);
  }
  return n;
}

type Rejection = { index: number; error: unknown };

export class KafkaTransactionalAdapter<T> implements SinkAdapter<T> {
  readonly kind = 'kafka-transactional';
  private readonly o: ResolvedKafkaTransactionalOptions<T>;
  private readonly sources = new Map<string, SourcePartition>();
  private readonly counters: KafkaTransactionalAdapterStats = {
    transactions: 0,
    failedTransactions: 0,
    fences: 0,
    fencedOut: 0,
    skippedStored: 0,
    unstableReads: 0,
  };
  private readonly partitioner: (args: PartitionerArgs) => number;
  private readonly metadata = new Map<string, { partitions: PartitionMetadata[]; at: number }>();
  private readonly metadataMaxAgeMs: number;
  private admin: Promise<Admin> | undefined;
  /** Reads stored offsets with require_stable; undefined when this kafkajs cannot. */
  private readonly stable: StableOffsetReader | undefined;
  private readonly releaseIds: () => void;
  private closed = false;

  constructor(options: KafkaTransactionalAdapterOptions<T>) {
    this.o = resolveKafkaTransactionalOptions(options);
    this.partitioner = (this.o.producer.createPartitioner ?? Partitioners.DefaultPartitioner)();
    this.metadataMaxAgeMs = this.o.producer.metadataMaxAge ?? DEFAULT_METADATA_MAX_AGE_MS;
    this.releaseIds = reserveIds(this.o.transactionalIdPrefix, this.o.group);
    this.stable = StableOffsetReader.open(this.o.kafka);
  }

  /** Counters since the adapter was made. */
  stats(): KafkaTransactionalAdapterStats {
    return { ...this.counters };
  }

  /**
   * For the bridge, on assignment: takes the transactional id of every partition (fencing every
   * former owner and ending its open transaction), then returns what is stored for them: the next
   * offset to read; partitions with nothing stored are left out.
   */
  async storedOffsets(
    group: string,
    partitions: ReadonlyArray<{ topic: string; partition: number }>,
  ): Promise<Array<{ topic: string; partition: number; offset: string }>> {
    if (group !== this.o.group)
      throw invalidOption('groupId', `the group the sink stores offsets for ("${this.o.group}")`, group);
    const found = await Promise.all(
      partitions.map(async ({ topic, partition }) => {
        const source = this.source(topic, partition);
        const floor = await source
          .exclusive(() => source.own())
          .catch((error: unknown) => {
            throw this.wrap(error, `take transactional id ${source.transactionalId}`);
          });
        return floor === undefined ? undefined : { topic, partition, offset: floor.toString() };
      }),
    );
    return found.filter((f) => f !== undefined);
  }

  // biome-ignore lint/suspicious/noConfusingVoidType: matches SinkAdapter.write
  async write(batch: Batch<T>): Promise<void | PartialWrite> {
    const rejected: Rejection[] = [];
    const bySource = new Map<SourcePartition, Array<{ index: number; offset: bigint }>>();
    for (let i = 0; i < batch.records.length; i++) {
      const s = sourceOf(batch.metas[i]);
      if (s === undefined) {
        rejected.push({
          index: i,
          error: new StoreError(
            'The transactional Kafka sink takes records from a KafkaBridge only: this record has no source topic, partition and offset',
            { details: { stage: 'no-source' } },
          ),
        });
        continue;
      }
      const source = this.source(s.topic, s.partition);
      let list = bySource.get(source);
      if (!list) bySource.set(source, (list = []));
      list.push({ index: i, offset: s.offset });
    }
    const tasks = [...bySource].map(([source, items]) =>
      source.exclusive(() => this.writeSource(source, batch, items)),
    );
    const outcomes = await Promise.allSettled(tasks);
    const failures: Array<{ items: Array<{ index: number }>; error: StoreError }> = [];
    let k = 0;
    for (const [source, items] of bySource) {
      const outcome = outcomes[k++]!;
      if (outcome.status === 'fulfilled') rejected.push(...outcome.value);
      else
        failures.push({
          items,
          error: this.wrap(outcome.reason, `transaction of ${source.transactionalId}`),
        });
    }
    // Nothing of the batch landed: the engine retries it, or bisects it on bad data.
    if (failures.length > 0 && failures.length === bySource.size && rejected.length === 0)
      throw failures[0]!.error;
    for (const { items, error } of failures) {
      // Other partitions committed: the failed ones come back as a retry, so that the next attempt
      // starts with them alone and a refused record can be isolated then.
      const cls = this.classify(error);
      const again =
        cls === 'split'
          ? new StoreError(
              `A source partition's transaction failed while others of the batch committed; sending it again: ${error.message}`,
              {
                cause: error,
                driverCode: error.driverCode,
                details: { stage: 'resend' },
              },
            )
          : error;
      for (const { index } of items) rejected.push({ index, error: again });
    }
    return rejected.length === 0 ? undefined : { rejected };
  }

  /**
   * The records of one source partition (in offset order): those below the stored offset are
   * written already and land as they are, a second copy of a message in the batch lands with its
   * first; the rest go out in one transaction with the offset after them. A record that cannot be mapped keeps the whole partition back this time, so that the
   * stored offset never passes a record before it is dead-lettered.
   */
  private async writeSource(
    source: SourcePartition,
    batch: Batch<T>,
    items: ReadonlyArray<{ index: number; offset: bigint }>,
  ): Promise<Rejection[]> {
    if (!source.owned) await source.own();
    const floor = source.stored;
    const fresh = floor === undefined ? items : items.filter((it) => it.offset >= floor);
    const { todo, copies } = onceEach(fresh);
    this.counters.skippedStored += items.length - todo.length;
    if (todo.length === 0) return [];
    const outgoing: Array<{ topic: string; message: Message }> = [];
    const bad: Rejection[] = [];
    let next = 0n;
    for (const { index, offset } of todo) {
      if (offset >= next) next = offset + 1n;
      try {
        outgoing.push(this.outgoing(batch.records[index] as T, batch.metas[index]));
      } catch (error) {
        bad.push({ index, error });
      }
    }
    const outputs = bad.length === 0 ? await this.place(todo, outgoing, bad) : [];
    if (bad.length > 0) {
      const badSet = new Set(bad.map((b) => b.index));
      const held = new StoreError(
        `${bad.length} record(s) of source partition ${source.topic}/${source.partition} could not be sent; the others wait for them to be dead-lettered`,
        { details: { stage: 'held', topic: source.topic, partition: source.partition } },
      );
      for (const { index } of todo) if (!badSet.has(index)) bad.push({ index, error: held });
      for (const index of copies) bad.push({ index, error: held });
      return bad;
    }
    await source.commit(outputs, next);
    return [];
  }

  /** The message a record becomes, and its topic; throws a mapping-stage StoreError. */
  private outgoing(record: T, meta: RecordMeta | undefined): { topic: string; message: Message } {
    let out: KafkaOutgoing;
    try {
      out = this.o.mapper(record, meta);
      if (typeof out !== 'object' || out === null || !('value' in out))
        throw new TypeError('the mapper must return an object with a `value`');
    } catch (error) {
      throw new StoreError(`Kafka mapper failed for a record: ${messageOf(error)}`, {
        cause: error,
        details: { stage: 'mapping' },
      });
    }
    const topic = out.topic ?? this.o.topic;
    if (topic === undefined)
      throw new StoreError('Kafka record has no topic: set `topic` or return one from the mapper', {
        details: { stage: 'mapping' },
      });
    const size = recordBytes(out);
    if (size > this.o.maxRecordBytes)
      throw new StoreError(
        `Kafka record of ${size} bytes exceeds maxRecordBytes (${this.o.maxRecordBytes}); not sent`,
        { driverCode: 'MESSAGE_TOO_LARGE', details: { stage: 'mapping', topic, bytes: size } },
      );
    const message: Message = { value: out.value };
    if (out.key !== undefined) message.key = out.key;
    if (out.headers !== undefined) message.headers = out.headers;
    if (out.partition !== undefined) message.partition = out.partition;
    if (out.timestamp !== undefined) message.timestamp = String(out.timestamp);
    return { topic, message };
  }

  /**
   * Groups the messages by output partition, chosen here with the producer's partitioner (the
   * Java client's murmur2 choice by default), in their order. A message for a partition the
   * topic does not have is added to `bad`.
   */
  private async place(
    todo: ReadonlyArray<{ index: number }>,
    outgoing: ReadonlyArray<{ topic: string; message: Message }>,
    bad: Rejection[],
  ): Promise<OutputPartition[]> {
    const groups = new Map<string, OutputPartition>();
    for (let j = 0; j < outgoing.length; j++) {
      const { topic, message } = outgoing[j]!;
      const partitionMetadata = await this.partitionsOf(topic);
      const partition = this.partitioner({ topic, partitionMetadata, message });
      if (!partitionMetadata.some((p) => p.partitionId === partition)) {
        bad.push({
          index: todo[j]!.index,
          error: new StoreError(`Kafka topic "${topic}" has no partition ${partition}; record not sent`, {
            driverCode: 'UNKNOWN_TOPIC_OR_PARTITION',
            details: { stage: 'mapping', topic, partition },
          }),
        });
        continue;
      }
      const key = `${topic}\u0000${partition}`;
      let group = groups.get(key);
      if (!group) groups.set(key, (group = { topic, partition, messages: [] }));
      group.messages.push({ ...message, partition });
    }
    return [...groups.values()];
  }

  private async partitionsOf(topic: string): Promise<PartitionMetadata[]> {
    const known = this.metadata.get(topic);
    if (known && Date.now() - known.at < this.metadataMaxAgeMs) return known.partitions;
    const admin = await this.connectedAdmin();
    const { topics } = await admin.fetchTopicMetadata({ topics: [topic] });
    const partitions = [...(topics[0]?.partitions ?? [])].sort((a, b) => a.partitionId - b.partitionId);
    if (partitions.length === 0)
      throw new StoreError(`Kafka topic "${topic}" has no partitions in the metadata`, {
        driverCode: 'UNKNOWN_TOPIC_OR_PARTITION',
        details: { topic },
      });
    this.metadata.set(topic, { partitions, at: Date.now() });
    return partitions;
  }

  private connectedAdmin(): Promise<Admin> {
    this.admin ??= (async () => {
      const admin = this.o.kafka.admin();
      await admin.connect();
      return admin;
    })().catch((error: unknown) => {
      this.admin = undefined;
      throw error;
    });
    return this.admin;
  }

  /**
   * The stored next offset of a source partition in the offsets group; undefined when none. Asked
   * with require_stable, so a transaction's offsets that are still being applied are waited for;
   * without the private cluster factory (another kafkajs version), as kafkajs asks.
   */
  private readonly readStored = async (topic: string, partition: number): Promise<bigint | undefined> => {
    if (this.stable !== undefined) {
      for (let attempt = 1; ; attempt++) {
        const reading = await this.stable.read(this.o.offsetsGroup, topic, partition);
        if (reading !== 'unstable') return reading.offset;
        this.counters.unstableReads++;
        if (attempt >= MAX_UNSTABLE_READS)
          throw new StoreError(
            `The stored offset of ${topic}/${partition} stayed unstable (a transaction's offsets not yet applied) over ${attempt} reads`,
            { driverCode: 'UNSTABLE_OFFSET_COMMIT', details: { topic, partition } },
          );
        await new Promise((resolve) => setTimeout(resolve, UNSTABLE_WAIT_MS));
      }
    }
    // Without require_stable a transaction's offsets can still be on their way: take the later of
    // readings SETTLE_MS apart until two agree (narrows the window, does not close it).
    let floor = await this.fetchOffset(topic, partition);
    for (let read = 1; read < MAX_SETTLE_READS; read++) {
      await new Promise((resolve) => setTimeout(resolve, SETTLE_MS));
      const again = await this.fetchOffset(topic, partition);
      if (again === floor) break;
      floor = again;
    }
    return floor;
  };

  /** The stored next offset as kafkajs' admin reads it (OffsetFetch v1–v4, no require_stable). */
  private async fetchOffset(topic: string, partition: number): Promise<bigint | undefined> {
    const admin = await this.connectedAdmin();
    const [t] = await admin.fetchOffsets({ groupId: this.o.offsetsGroup, topics: [topic] });
    const found = t?.partitions.find((p) => p.partition === partition);
    // kafkajs reports "nothing committed" as -1.
    if (found === undefined || Number(found.offset) < 0) return undefined;
    return BigInt(found.offset);
  }

  private source(topic: string, partition: number): SourcePartition {
    const key = `${topic}\u0000${partition}`;
    let s = this.sources.get(key);
    if (!s) {
      const { kafka, producer, transactionTimeoutMs, ackTimeoutMs, compression, offsetsGroup } = this.o;
      s = new SourcePartition(
        topic,
        partition,
        transactionalIdOf(this.o.transactionalIdPrefix, this.o.group, topic, partition),
        {
          kafka,
          producer,
          transactionTimeoutMs,
          ackTimeoutMs,
          compression,
          offsetsGroup,
          readStored: this.readStored,
          counters: this.counters,
        },
      );
      this.sources.set(key, s);
    }
    return s;
  }

  private wrap(error: unknown, what: string): StoreError {
    if (error instanceof StoreError) return error;
    return new StoreError(`Kafka ${what} failed: ${messageOf(error)}`, {
      cause: error,
      driverCode: kafkaErrorType(error),
    });
  }

  classify(error: unknown): ErrorClass {
    if (error instanceof StoreError) {
      const stage = error.details.stage;
      if (stage === 'mapping') return 'split';
      if (stage === 'held' || stage === 'resend' || stage === 'unacknowledged') return 'retry';
      if (stage === 'no-source') return 'fatal';
    }
    const type = kafkaErrorType(error);
    if (type !== undefined && TRANSACTION_RETRY.has(type)) return 'retry';
    return classifyKafkaError(error);
  }

  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    this.releaseIds();
    await Promise.all([...this.sources.values()].map((s) => s.exclusive(() => s.drop())));
    await this.stable?.close();
    const admin = await this.admin?.catch(() => undefined);
    this.admin = undefined;
    await admin?.disconnect();
  }
}

/** Creates the transactional Kafka sink adapter; pass it to `new Sink(adapter, options)`. */
export function kafkaTransactionalAdapter<T>(
  options: KafkaTransactionalAdapterOptions<T>,
): KafkaTransactionalAdapter<T> {
  return new KafkaTransactionalAdapter(options);
}

/**
 * The items with each source offset once (the first copy), and the batch indexes of the other
 * copies: a message a bridge fetched again while its first copy still waited in the sink is the
 * same message, and one transaction must not write it twice. Items usually come in offset order,
 * which needs no set.
 */
function onceEach<I extends { index: number; offset: bigint }>(
  items: readonly I[],
): { todo: readonly I[]; copies: number[] } {
  let ascending = true;
  for (let k = 1; k < items.length && ascending; k++) ascending = items[k]!.offset > items[k - 1]!.offset;
  if (ascending) return { todo: items, copies: [] };
  const seen = new Set<bigint>();
  const todo: I[] = [];
  const copies: number[] = [];
  for (const it of items) {
    if (seen.has(it.offset)) copies.push(it.index);
    else {
      seen.add(it.offset);
      todo.push(it);
    }
  }
  return { todo, copies };
}
