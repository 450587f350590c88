export { RedisAdapter, redisAdapter } from './adapter.js';
export type { RedisAdapterOptions } from './options.js';
export type { RedisArg, RedisCommand, RedisMapping } from './commands.js';
export { stringValue, hashFields, sortedSetMember, streamEntry, counter, commandMapping, offsetStreamId } from './mappings.js';
export type { StringValueMapping, HashFieldsMapping, SortedSetMemberMapping, StreamEntryMapping, CounterMapping, CustomMapping } from './mappings.js';
export { classifyRedisError, redisErrorPrefix, isUnknownOutcome } from './classify.js';
export type { RedisClassifyOptions } from './classify.js';
export { keySlot } from './slot.js';
