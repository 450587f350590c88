export { RedisAdapter, type RedisAdapterStats, redisAdapter } from './adapter.js';
export type { RedisClassifyOptions } from './classify.js';
export { classifyRedisError, isUnknownOutcome, redisErrorPrefix } from './classify.js';
export type { RedisArg, RedisCommand, RedisMapping } from './commands.js';
export type {
  CounterMapping,
  CustomMapping,
  HashFieldsMapping,
  SortedSetMemberMapping,
  StreamEntryMapping,
  StringValueMapping,
} from './mappings.js';
export {
  commandMapping,
  counter,
  hashFields,
  offsetStreamId,
  sortedSetMember,
  streamEntry,
  stringValue,
} from './mappings.js';
export type { RedisAdapterOptions, StoreOffsetsOptions } from './options.js';
export { keySlot } from './slot.js';
