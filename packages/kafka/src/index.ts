export { classifyKafkaError, kafkaErrorType } from './classify.js';
export type { KafkaClassifyOptions } from './classify.js';
