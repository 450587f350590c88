export { classifyKafkaError, kafkaErrorType } from './classify.js';
export type { KafkaClassifyOptions } from './classify.js';
export { KafkaBridge } from './bridge.js';
export type { BridgeState, BridgeSnapshot, PartitionSnapshot, BridgeEvents, BridgeEventName, StopOptions } from './bridge.js';
export type { KafkaBridgeOptions, Route } from './bridge-options.js';
export { DecodeError } from './decode.js';
export type { KafkaSource, UndecodableMessage } from './decode.js';
export { KafkaProducerAdapter, kafkaProducerAdapter } from './producer.js';
export type { KafkaProducerAdapterOptions, KafkaOutgoing } from './producer-options.js';
