/**
 * Options of the Redis adapter (`redisAdapter()`), validated in the constructor.
 */
import { booleanOption, choiceOption, invalidOption, knownOptions } from '@spillway/core/kit';
import type { Cluster, Redis } from 'ioredis';
import type { RedisMapping } from './commands.js';

export interface RedisAdapterOptions<T> {
  /**
   * The ioredis client: a `Redis` or a `Cluster`. The adapter never creates or configures it; it
   * closes it only with `closeClient: true`. With a `Cluster`, batches are split by node
   * (pipelines) or by slot (`atomic`) before they are sent; ioredis follows MOVED / ASK.
   * @example new Redis('redis://127.0.0.1:6379')
   */
  client: Redis | Cluster;
  /**
   * How a record becomes commands: one of the ready-made mappings (`stringValue`, `hashFields`,
   * `sortedSetMember`, `streamEntry`, `counter`) or `commandMapping({ commands, idempotent })`.
   * @example hashFields({ key: (r) => `tandem:dock:${r.dockId}`, fields: (r) => ({ free: r.free }) })
   */
  mapping: RedisMapping<T>;
  /**
   * Send each batch as one MULTI/EXEC transaction instead of a plain pipeline: other clients never
   * see half a batch. A command the server refuses while queueing (EXECABORT) aborts the whole
   * transaction, and the batch is bisected to find the record; an error while executing (e.g.
   * WRONGTYPE) fails only its record while the others are applied (Redis does not roll back).
   * @default false
   * @example true
   */
  atomic?: boolean;
  /**
   * What to do with a record whose commands were sent but whose replies never came (the
   * connection dropped: ioredis' AbortError; or the client's `commandTimeout` expired): the
   * command may or may not have run.
   * - `'retry'`: write it again. Correct for idempotent mappings; a non-idempotent one (INCRBY,
   *   XADD with `*`) may then apply twice.
   * - `'dead-letter'`: hand it to the dead-letter target, so the sink never applies it twice; the
   *   user decides whether to replay it.
   * @default 'retry' when `mapping.idempotent`, else 'dead-letter'
   * @example 'retry'
   */
  onUnknownOutcome?: 'retry' | 'dead-letter';
  /**
   * Exactly-once from a Kafka bridge: each batch goes out as one Lua script that also stores, for
   * every source partition in the batch, the next offset to read, in the hash `key` under `group`
   * (field `<group>/<topic>/<partition>`). Data and offsets land together; the store is a
   * compare-and-set, so a batch whose records are stored already (a replay, a stale consumer, a
   * script ioredis sent twice) writes only the records not yet stored. Give the bridge this adapter
   * in `offsetStores`. Implies `atomic`; with a `Cluster` every key of a batch must be in `key`'s
   * slot (one `{hash tag}`), or the batch is refused. Not with a mapping that runs its own script
   * (`counter` with `dedupe`: the plain `counter` is exactly-once here).
   * @default undefined (offsets are not stored; at-least-once)
   * @example { group: 'dock-availability', key: 'tandem:{events}:offsets' }
   */
  storeOffsets?: StoreOffsetsOptions;
  /**
   * Quit the client when the sink closes.
   * @default false
   * @example true
   */
  closeClient?: boolean;
}

export interface StoreOffsetsOptions {
  /** The Kafka consumer group the offsets belong to (the bridge's `groupId`). */
  group: string;
  /**
   * The hash holding this sink's offsets. One per sink: two sinks sharing it would skip each
   * other's records. With a `Cluster`, in the slot of the sink's data keys.
   */
  key: string;
}

export interface ResolvedRedisOptions<T> {
  client: Redis | Cluster;
  mapping: RedisMapping<T>;
  atomic: boolean;
  onUnknownOutcome: 'retry' | 'dead-letter';
  closeClient: boolean;
  storeOffsets: StoreOffsetsOptions | undefined;
}

const KNOWN = new Set(['client', 'mapping', 'atomic', 'onUnknownOutcome', 'closeClient', 'storeOffsets']);

function storeOffsetsOption(
  value: unknown,
  atomic: boolean | undefined,
  mapping: { name: string; scripted?: boolean },
): StoreOffsetsOptions | undefined {
  if (value === undefined) return undefined;
  const o = knownOptions(value, ['group', 'key'], 'storeOffsets');
  if (typeof o.group !== 'string' || o.group.length === 0)
    throw invalidOption('storeOffsets.group', 'the consumer group id (a non-empty string)', o.group);
  if (typeof o.key !== 'string' || o.key.length === 0)
    throw invalidOption('storeOffsets.key', 'the name of the hash holding this sink’s offsets', o.key);
  if (atomic === false)
    throw invalidOption(
      'atomic',
      'true or left out with `storeOffsets` (the offsets go with the batch)',
      atomic,
    );
  if (mapping.scripted === true)
    throw invalidOption(
      'mapping',
      `a mapping that runs no script of its own with \`storeOffsets\` (scripts cannot call scripts; "${mapping.name}" with \`dedupe\` does — the plain counter is exactly-once with \`storeOffsets\`)`,
      mapping.name,
    );
  return { group: o.group, key: o.key };
}

export function resolveRedisOptions<T>(options: RedisAdapterOptions<T>): ResolvedRedisOptions<T> {
  if (options === undefined) throw invalidOption('options', 'an object', options);
  knownOptions(options, KNOWN);
  const { client, mapping } = options;
  if (
    typeof client !== 'object' ||
    client === null ||
    typeof (client as { pipeline?: unknown }).pipeline !== 'function'
  ) {
    throw invalidOption('client', 'an ioredis Redis or Cluster client', client);
  }
  if (
    typeof mapping !== 'object' ||
    mapping === null ||
    typeof mapping.commands !== 'function' ||
    typeof mapping.idempotent !== 'boolean'
  ) {
    throw invalidOption(
      'mapping',
      'a mapping with commands() and idempotent (e.g. stringValue({...}))',
      mapping,
    );
  }
  const storeOffsets = storeOffsetsOption(options.storeOffsets, options.atomic, mapping);
  const atomic = booleanOption('atomic', options.atomic, storeOffsets !== undefined);
  const onUnknownOutcome = choiceOption(
    'onUnknownOutcome',
    options.onUnknownOutcome,
    ['retry', 'dead-letter'],
    mapping.idempotent ? 'retry' : 'dead-letter',
  );
  const closeClient = booleanOption('closeClient', options.closeClient, false);
  return { client, mapping, atomic, onUnknownOutcome, closeClient, storeOffsets };
}
