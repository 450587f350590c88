export { KafkaBridge } from './bridge.js';
export type { KafkaBridgeOptions, OffsetStore, OffsetStoreEntry, Route } from './bridge-options.js';
export type {
  BridgeCounts,
  BridgeEventName,
  BridgeEvents,
  BridgeSnapshot,
  BridgeState,
  PartitionSnapshot,
  StopOptions,
} from './bridge-types.js';
export type { KafkaClassifyOptions } from './classify.js';
export { classifyKafkaError, kafkaErrorType } from './classify.js';
export type { KafkaSource, UndecodableMessage } from './decode.js';
export { DecodeError } from './decode.js';
export { KafkaProducerAdapter, kafkaProducerAdapter } from './producer.js';
export type { KafkaOutgoing, KafkaProducerAdapterOptions } from './producer-options.js';
export type { KafkaTransactionalAdapterOptions } from './transactional-options.js';
export type { KafkaTransactionalAdapterStats } from './transactional-sink.js';
export { KafkaTransactionalAdapter, kafkaTransactionalAdapter } from './transactional-sink.js';
