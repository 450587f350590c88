/**
 * The transactions of one source partition: its own transactional producer, the stored next
 * offset as this producer last saw it, and one operation at a time.
 *
 * Ownership is taken by opening a fresh producer: its first `transaction()` (InitProducerId) bumps
 * the id's epoch, which fences every older producer with the same id and ends the transaction it
 * had open. Only then is the stored offset read, so no transaction of a former owner can still
 * move it. From then on this producer's own commits are the only ones that can move it, so the
 * floor it keeps is exact until another owner fences it (its next transaction then fails).
 */

import { StoreError } from '@spillway/core';
import type { Kafka, Message, Producer, ProducerConfig, RecordMetadata } from 'kafkajs';
import { CompressionTypes } from 'kafkajs';
import { kafkaErrorType } from './classify.js';

/** Messages for one partition of an output topic. */
export interface OutputPartition {
  readonly topic: string;
  readonly partition: number;
  readonly messages: Message[];
}

export interface TransactionCounters {
  /** Transactions committed. */
  transactions: number;
  /** Transactions that failed (aborted, or left to the next owner's fence). */
  failedTransactions: number;
  /** Producers opened, each one fencing the ones before it with the same transactional id. */
  fences: number;
  /** Transactions refused because another producer with the same id had fenced this one. */
  fencedOut: number;
}

export interface PartitionDeps {
  kafka: Kafka;
  producer: ProducerConfig;
  transactionTimeoutMs: number;
  ackTimeoutMs: number;
  compression: CompressionTypes | undefined;
  offsetsGroup: string;
  /**
   * The stored next offset of a source partition in the offsets group, once every transaction
   * that moved it is visible; undefined: none.
   */
  readStored(topic: string, partition: number): Promise<bigint | undefined>;
  counters: TransactionCounters;
}

/** Broker error types that mean another producer with this transactional id took over. */
const FENCED = new Set(['INVALID_PRODUCER_EPOCH', 'PRODUCER_FENCED']);

export class SourcePartition {
  readonly topic: string;
  readonly partition: number;
  readonly transactionalId: string;
  private readonly deps: PartitionDeps;
  private producer: Producer | undefined;
  /** The stored next offset as of this producer's fence and its own commits since. */
  private floor: bigint | undefined;
  private chain: Promise<unknown> = Promise.resolve();

  constructor(topic: string, partition: number, transactionalId: string, deps: PartitionDeps) {
    this.topic = topic;
    this.partition = partition;
    this.transactionalId = transactionalId;
    this.deps = deps;
  }

  /** Runs `work` after every earlier operation on this partition has ended. */
  exclusive<R>(work: () => Promise<R>): Promise<R> {
    const run = this.chain.then(work);
    this.chain = run.catch(() => undefined);
    return run;
  }

  /** Whether a producer of this process holds the id (it may have been fenced since). */
  get owned(): boolean {
    return this.producer !== undefined;
  }

  /** The stored next offset as this producer knows it; undefined when nothing is stored. */
  get stored(): bigint | undefined {
    return this.floor;
  }

  /**
   * Takes the id: drops this process's producer, opens a new one (fencing every other holder and
   * ending its open transaction), then reads the stored next offset. Call inside `exclusive`.
   */
  async own(): Promise<bigint | undefined> {
    await this.drop();
    const producer = this.deps.kafka.producer({
      ...this.deps.producer,
      transactionalId: this.transactionalId,
      idempotent: true,
      transactionTimeout: this.deps.transactionTimeoutMs,
    });
    try {
      await producer.connect();
      // InitProducerId happens at the first transaction(); an empty transaction ends without a
      // request (kafkajs sends EndTxn only when something joined it).
      const fence = await producer.transaction();
      await fence.abort();
      this.deps.counters.fences++;
      const floor = await this.deps.readStored(this.topic, this.partition);
      this.producer = producer;
      this.floor = floor;
      return floor;
    } catch (error) {
      await producer.disconnect().catch(() => undefined);
      throw error;
    }
  }

  /**
   * One transaction: the messages, then the source partition's next offset `next` in the offsets
   * group, then commit. On any failure nothing is committed by this producer again: it aborts if
   * it still can and is dropped, so the next attempt fences anew and reads what is stored (a
   * commit whose reply was lost is settled that way). Call inside `exclusive`, after `own()`.
   */
  async commit(outputs: readonly OutputPartition[], next: bigint): Promise<void> {
    const producer = this.producer;
    if (producer === undefined)
      throw new StoreError(`No producer holds ${this.transactionalId}: commit() before own()`);
    const { counters, ackTimeoutMs, compression, offsetsGroup } = this.deps;
    let txn: Awaited<ReturnType<Producer['transaction']>> | undefined;
    try {
      txn = await producer.transaction();
      const open = txn;
      // One send per output partition: a kafkajs send spanning brokers can, when one of them fails,
      // send the others' requests again (producer/sendMessages.js, 2.2.4), and a transaction would
      // commit those copies. One partition per call reaches one leader at a time.
      const results = await Promise.all(
        outputs.map((o) =>
          open.send({
            topic: o.topic,
            messages: o.messages,
            acks: -1,
            timeout: ackTimeoutMs,
            compression: compression ?? CompressionTypes.None,
          }),
        ),
      );
      for (let k = 0; k < outputs.length; k++) checkAcknowledged(outputs[k]!, results[k]!);
      // Data first: AddOffsetsToTxn is sent once, without kafkajs' retries, and as the first call
      // of a transaction it meets CONCURRENT_TRANSACTIONS while the last one's markers are written.
      await open.sendOffsets({
        consumerGroupId: offsetsGroup,
        topics: [{ topic: this.topic, partitions: [{ partition: this.partition, offset: next.toString() }] }],
      });
      await open.commit();
      counters.transactions++;
      this.floor = next;
    } catch (error) {
      counters.failedTransactions++;
      if (FENCED.has(kafkaErrorType(error) ?? '')) counters.fencedOut++;
      if (txn?.isActive()) await txn.abort().catch(() => undefined);
      await this.drop();
      throw error;
    }
  }

  /** Closes this process's producer; the id is taken again by the next `own()`. */
  async drop(): Promise<void> {
    const producer = this.producer;
    this.producer = undefined;
    this.floor = undefined;
    await producer?.disconnect().catch(() => undefined);
  }
}

/**
 * A send inside a transaction must have reached the one partition it was for: kafkajs can resolve
 * a send without having written a partition whose leader moved during the call.
 */
function checkAcknowledged(out: OutputPartition, result: readonly RecordMetadata[]): void {
  if (result.some((r) => r.topicName === out.topic && r.partition === out.partition && r.errorCode === 0))
    return;
  throw new StoreError(
    `Kafka produce response has no acknowledgement for topic "${out.topic}" partition ${out.partition} (its leader changed during the send): the transaction is not committed`,
    {
      details: {
        stage: 'unacknowledged',
        topic: out.topic,
        partition: out.partition,
        records: out.messages.length,
      },
    },
  );
}
