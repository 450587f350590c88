/**
 * Options of the consumer bridge (`KafkaBridge`), their defaults and their validation.
 */
import type { DeadLetterTarget, ShutdownCoordinator, Sink } from '@spillway/core';
import {
  booleanOption,
  invalidOption,
  knownOptions,
  nonNegativeOption,
  positiveOption,
} from '@spillway/core/kit';
import type { Consumer, ConsumerConfig, Kafka, KafkaMessage } from 'kafkajs';
import type { DecodeError, KafkaSource, UndecodableMessage } from './decode.js';

/**
 * What a sink adapter that stores offsets with its data offers the bridge: reading them back.
 * (An adapter capability; `@spillway/postgres`'s adapter has it when given `storeOffsets`.)
 */
export interface OffsetStore {
  /** The next offset to read per partition, as stored for `group`; partitions with none are left out. */
  storedOffsets(
    group: string,
    partitions: ReadonlyArray<{ topic: string; partition: number }>,
  ): Promise<ReadonlyArray<{ topic: string; partition: number; offset: string }>>;
}

/** A sink that stores offsets with its data, and the adapter that reads them back. */
export interface OffsetStoreEntry {
  // biome-ignore lint/suspicious/noExplicitAny: the sinks of one bridge may take different record types
  readonly sink: Sink<any>;
  readonly store: OffsetStore;
}

/** Where a record goes: one sink, several (each gets the record), or none (`undefined`, `[]`). */
export type Route<R> = Sink<R> | readonly Sink<R>[] | undefined | null;

export interface KafkaBridgeOptions<R> {
  /**
   * A kafkajs consumer, not yet connected, created with the group id you want. The bridge
   * connects, subscribes and runs it, and disconnects it on `stop()`. Give either `consumer` or
   * `kafka` + `groupId`.
   * @example kafka.consumer({ groupId: 'dock-status-writer', sessionTimeout: 30_000 })
   */
  consumer?: Consumer;
  /**
   * A kafkajs client to create the consumer from (with `groupId` and `consumerConfig`).
   * @example new Kafka({ clientId: 'tandem-dock-status', brokers: ['127.0.0.1:9092'] })
   */
  kafka?: Kafka;
  /**
   * Consumer group id, when the bridge creates the consumer from `kafka`. With `consumer` and
   * `offsetStores`, the consumer's group id (the stored offsets are read under it).
   * @example 'dock-status-writer'
   */
  groupId?: string;
  /**
   * More kafkajs consumer settings when the bridge creates the consumer (`groupId` is taken from
   * the option above).
   * @default {}
   * @example { sessionTimeout: 30_000, heartbeatInterval: 3_000, maxWaitTimeInMs: 500 }
   */
  consumerConfig?: Omit<ConsumerConfig, 'groupId'>;
  /**
   * Topics to subscribe to (names or patterns).
   * @example ['tandem.dock-status']
   */
  topics: ReadonlyArray<string | RegExp>;
  /**
   * Where a group with no committed offset starts: the earliest message (`true`) or new ones only.
   * @default false
   * @example true
   */
  fromBeginning?: boolean;
  /**
   * Turns a message into a record, or returns (or throws) a `DecodeError` for a message that
   * cannot be read; that message is dead-lettered and the partition moves on. Copy anything you
   * keep from `message.key` / `message.value`: they are slices of the whole fetch buffer.
   * @example (m) => { try { return JSON.parse(m.value!.toString('utf8')); } catch (e) { return new DecodeError('not JSON', { cause: e }); } }
   */
  decode: (message: KafkaMessage, source: KafkaSource) => R | DecodeError;
  /**
   * The sink(s) a record goes to. A message is committed only once its record is durable (or
   * dead-lettered) in every sink it was routed to; a message routed nowhere is done at once.
   * @example (event) => [dockStatusSink, availabilitySink]
   */
  route: (record: R, source: KafkaSource) => Route<R>;
  /**
   * Where undecodable messages go, with topic, partition, offset and their raw bytes.
   * @example fileDeadLetter('/var/lib/tandem/undecodable.ndjson')
   */
  deadLetter: DeadLetterTarget<UndecodableMessage>;
  /**
   * How often the durable commit points are committed, ms. `commit()` commits on demand.
   * @default 1000
   * @example 5000
   */
  commitIntervalMs?: number;
  /**
   * When the group rebalances: how long to wait for this member's buffered records to become
   * durable before committing and rejoining, ms. Keep it well under the consumer's
   * `sessionTimeout` and `rebalanceTimeout`; records not durable by then are not committed and
   * the next owner reads them again.
   * @default 5000
   * @example 10_000
   */
  rebalanceFlushMs?: number;
  /**
   * When a sink has no room for a batch: how long the batch handler waits for room (heartbeats
   * continue) before it pauses the partition and returns, ms. A sink that drains within this
   * time costs no pause: kafkajs sleeps `maxWaitTimeInMs` when every partition it could fetch is
   * paused, and drops fetched data of partitions paused meanwhile. While a handler waits, kafkajs
   * hands out no other batch (with `partitionsConsumedConcurrently: 1`). `0` pauses at once.
   * Keep it well under the consumer's `sessionTimeout`.
   * @default 1000
   * @example 0
   */
  pauseAfterMs?: number;
  /**
   * The process's shutdown coordinator. The bridge registers its steps in the coordinator's
   * stages: stop fetching (`sources`), flush (`sinks`), commit (`progress`), disconnect (`clients`).
   * @example installShutdown({ timeoutMs: 25_000 })
   */
  shutdown?: ShutdownCoordinator;
  /**
   * Name used in events, errors and the dead letters of undecodable messages.
   * @default 'kafka-bridge'
   * @example 'dock-status-bridge'
   */
  name?: string;
  /**
   * Sinks that store the next offset to read with their data, in the same transaction
   * (exactly-once), each with the adapter that reads the offsets back. When partitions are
   * assigned, the bridge keeps them paused until it has read every store's offsets for them,
   * then hands each sink only the messages at or past its own stored offset. Needs `groupId`.
   * @default []
   * @example [{ sink: dockStatusSink, store: dockStatusAdapter }]
   */
  offsetStores?: ReadonlyArray<OffsetStoreEntry>;
  /**
   * Records buffered at most for undecodable messages before their partitions pause.
   * @default 1000
   * @example 100
   */
  maxPendingDeadLetters?: number;
}

export interface ResolvedBridgeOptions<R> {
  consumer: Consumer;
  topics: ReadonlyArray<string | RegExp>;
  fromBeginning: boolean;
  decode: KafkaBridgeOptions<R>['decode'];
  route: KafkaBridgeOptions<R>['route'];
  deadLetter: DeadLetterTarget<UndecodableMessage>;
  commitIntervalMs: number;
  rebalanceFlushMs: number;
  pauseAfterMs: number;
  shutdown: ShutdownCoordinator | undefined;
  name: string;
  maxPendingDeadLetters: number;
  offsetStores: ReadonlyArray<OffsetStoreEntry>;
  /** The consumer group (for reading stored offsets); undefined when only a consumer was given. */
  groupId: string | undefined;
}

const KNOWN = new Set([
  'consumer',
  'kafka',
  'groupId',
  'consumerConfig',
  'topics',
  'fromBeginning',
  'decode',
  'route',
  'deadLetter',
  'commitIntervalMs',
  'rebalanceFlushMs',
  'pauseAfterMs',
  'shutdown',
  'name',
  'maxPendingDeadLetters',
  'offsetStores',
]);

/** Applies defaults and validates; throws a `TypeError` naming the first bad option. */
export function resolveBridgeOptions<R>(options: KafkaBridgeOptions<R>): ResolvedBridgeOptions<R> {
  if (typeof options !== 'object' || options === null) throw invalidOption('options', 'an object', options);
  knownOptions(options, KNOWN);
  let consumer: Consumer;
  if (options.consumer !== undefined) {
    if (options.kafka !== undefined)
      throw invalidOption('kafka', 'absent when `consumer` is given', 'a Kafka client');
    if (typeof (options.consumer as { run?: unknown }).run !== 'function')
      throw invalidOption('consumer', 'a kafkajs Consumer', options.consumer);
    consumer = options.consumer;
  } else {
    if (
      options.kafka === undefined ||
      typeof (options.kafka as { consumer?: unknown }).consumer !== 'function'
    ) {
      throw invalidOption('kafka', 'a kafkajs Kafka client (or give `consumer`)', options.kafka);
    }
    if (typeof options.groupId !== 'string' || options.groupId.length === 0)
      throw invalidOption('groupId', 'a non-empty string', options.groupId);
    const config = options.consumerConfig ?? {};
    if (typeof config !== 'object' || config === null)
      throw invalidOption('consumerConfig', 'an object', options.consumerConfig);
    consumer = options.kafka.consumer({ ...config, groupId: options.groupId });
  }
  const topics = options.topics;
  if (
    !Array.isArray(topics) ||
    topics.length === 0 ||
    !topics.every((t) => (typeof t === 'string' && t.length > 0) || t instanceof RegExp)
  ) {
    throw invalidOption('topics', 'a non-empty array of topic names or RegExps', topics);
  }
  if (typeof options.decode !== 'function')
    throw invalidOption('decode', 'a function (message, source) => record | DecodeError', options.decode);
  if (typeof options.route !== 'function')
    throw invalidOption('route', 'a function (record, source) => sink | sink[]', options.route);
  const dl = options.deadLetter as { write?: unknown } | undefined;
  if (!dl || typeof dl.write !== 'function')
    throw invalidOption(
      'deadLetter',
      'a DeadLetterTarget (an object with write(letters))',
      options.deadLetter,
    );
  const name = options.name ?? 'kafka-bridge';
  if (typeof name !== 'string' || name.length === 0)
    throw invalidOption('name', 'a non-empty string', options.name);
  const shutdown = options.shutdown;
  if (
    shutdown !== undefined &&
    (typeof shutdown !== 'object' || typeof (shutdown as { add?: unknown }).add !== 'function')
  ) {
    throw invalidOption('shutdown', 'a ShutdownCoordinator', shutdown);
  }
  const offsetStores = options.offsetStores ?? [];
  if (!Array.isArray(offsetStores))
    throw invalidOption('offsetStores', 'an array of { sink, store }', options.offsetStores);
  for (const [i, e] of offsetStores.entries()) {
    const entry = e as Partial<OffsetStoreEntry> | null;
    if (typeof entry?.sink?.tryWriteMany !== 'function')
      throw invalidOption(`offsetStores[${i}].sink`, 'a Spillway sink', entry?.sink);
    if (typeof entry.store?.storedOffsets !== 'function')
      throw invalidOption(
        `offsetStores[${i}].store`,
        'an adapter with storedOffsets(group, partitions) (a PostgreSQL adapter with `storeOffsets`)',
        entry.store,
      );
  }
  const groupId = options.groupId;
  if (groupId !== undefined && (typeof groupId !== 'string' || groupId.length === 0))
    throw invalidOption('groupId', 'a non-empty string', groupId);
  if (offsetStores.length > 0 && groupId === undefined)
    throw invalidOption('groupId', 'the consumer group id (needed with `offsetStores`)', groupId);
  return {
    offsetStores,
    groupId,
    consumer,
    topics,
    fromBeginning: booleanOption('fromBeginning', options.fromBeginning, false),
    decode: options.decode,
    route: options.route,
    deadLetter: options.deadLetter,
    commitIntervalMs: positiveOption('commitIntervalMs', options.commitIntervalMs, 1000),
    rebalanceFlushMs: positiveOption('rebalanceFlushMs', options.rebalanceFlushMs, 5000),
    pauseAfterMs: nonNegativeOption('pauseAfterMs', options.pauseAfterMs, 1000),
    shutdown,
    name,
    maxPendingDeadLetters: positiveOption('maxPendingDeadLetters', options.maxPendingDeadLetters, 1000, true),
  };
}
