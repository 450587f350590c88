/**
 * Ready-made mappings for the common shapes of live data in Redis. Each states whether it is
 * idempotent under replay (the same record written twice leaves the same data as once).
 */
import type { RecordMeta } from '@spillway/core';
import { invalidOption } from '@spillway/core/kit';
import type { RedisArg, RedisCommand, RedisMapping } from './commands.js';

/** A value taken from the record (and its metadata). */
type From<T, V> = (record: T, meta: RecordMeta | undefined) => V;

function fn<F>(name: string, value: unknown): F {
  if (typeof value !== 'function') throw invalidOption(name, 'a function', value);
  return value as F;
}

function ttlOption<T>(name: string, value: unknown): From<T, number> | undefined {
  if (value === undefined) return undefined;
  if (typeof value === 'function') return value as From<T, number>;
  if (typeof value === 'number' && Number.isInteger(value) && value > 0) return () => value;
  throw invalidOption(name, 'an integer > 0 (milliseconds) or a function returning one', value);
}

function flatten(
  fields: Readonly<Record<string, RedisArg>> | ReadonlyMap<string, RedisArg>,
  into: RedisArg[],
): void {
  if (fields instanceof Map) {
    for (const [k, v] of fields) into.push(k, v);
    return;
  }
  // for…in over own fields: no intermediate entries array on the hot path.
  for (const k in fields) into.push(k, (fields as Readonly<Record<string, RedisArg>>)[k]!);
}

// ------------------------------------------------------------------------------------ string

export interface StringValueMapping<T> {
  /** @example (r) => `tandem:dock:${r.dockId}:status` */
  key: From<T, string | Buffer>;
  /** The value, as text or bytes. @example (r) => JSON.stringify(r) */
  value: From<T, string | Buffer>;
  /** Expiry in ms (`SET … PX`), fixed or per record; none when undefined. @default undefined */
  ttlMs?: number | From<T, number>;
}

/** `SET key value [PX ttl]`. Idempotent: a replay writes the same value again. */
export function stringValue<T>(options: StringValueMapping<T>): RedisMapping<T> {
  const key = fn<From<T, string | Buffer>>('key', options?.key);
  const value = fn<From<T, string | Buffer>>('value', options.value);
  const ttl = ttlOption<T>('ttlMs', options.ttlMs);
  return {
    name: 'string',
    idempotent: true,
    commands(record, meta): RedisCommand {
      if (ttl === undefined) return ['SET', key(record, meta), value(record, meta)];
      return ['SET', key(record, meta), value(record, meta), 'PX', ttl(record, meta)];
    },
  };
}

// ------------------------------------------------------------------------------------ hash

export interface HashFieldsMapping<T> {
  /** @example (r) => `tandem:dock:${r.dockId}` */
  key: From<T, string | Buffer>;
  /** Fields to set (others in the hash are kept). @example (r) => ({ free: r.free, bikes: r.bikes }) */
  fields: From<T, Readonly<Record<string, RedisArg>> | ReadonlyMap<string, RedisArg>>;
  /** Expiry of the whole hash in ms (`PEXPIRE` after `HSET`); none when undefined. @default undefined */
  ttlMs?: number | From<T, number>;
}

/** `HSET key f1 v1 f2 v2 …` [+ `PEXPIRE key ttl`]. Idempotent: a replay sets the same fields. */
export function hashFields<T>(options: HashFieldsMapping<T>): RedisMapping<T> {
  const key = fn<From<T, string | Buffer>>('key', options?.key);
  const fields = fn<HashFieldsMapping<T>['fields']>('fields', options.fields);
  const ttl = ttlOption<T>('ttlMs', options.ttlMs);
  return {
    name: 'hash',
    idempotent: true,
    commands(record, meta) {
      const k = key(record, meta);
      const hset: [string, ...RedisArg[]] = ['HSET', k];
      flatten(fields(record, meta), hset);
      return ttl === undefined ? hset : [hset, ['PEXPIRE', k, ttl(record, meta)]];
    },
  };
}

// ------------------------------------------------------------------------------------ sorted set

export interface SortedSetMemberMapping<T> {
  /** @example (r) => `tandem:district:${r.district}:free` */
  key: From<T, string | Buffer>;
  /** @example (r) => r.dockId */
  member: From<T, string | Buffer>;
  /** @example (r) => r.freeSlots */
  score: From<T, number>;
}

/** `ZADD key score member`. Idempotent: a replay sets the same score. */
export function sortedSetMember<T>(options: SortedSetMemberMapping<T>): RedisMapping<T> {
  const key = fn<From<T, string | Buffer>>('key', options?.key);
  const member = fn<From<T, string | Buffer>>('member', options.member);
  const score = fn<From<T, number>>('score', options.score);
  return {
    name: 'sorted-set',
    idempotent: true,
    commands(record, meta): RedisCommand {
      // Scores travel as text; String() keeps 17 significant digits, enough for a double.
      return ['ZADD', key(record, meta), String(score(record, meta)), member(record, meta)];
    },
  };
}

// ------------------------------------------------------------------------------------ stream

export interface StreamEntryMapping<T> {
  /** @example (r) => `tandem:events:${r.district}` */
  key: From<T, string | Buffer>;
  /** The entry's fields. @example (r) => ({ dock: r.dockId, kind: r.kind }) */
  fields: From<T, Readonly<Record<string, RedisArg>> | ReadonlyMap<string, RedisArg>>;
  /**
   * Trim the stream to about this many entries (`MAXLEN ~ n`); none when undefined.
   * @default undefined
   * @example 100000
   */
  maxLen?: number;
  /** Trim to exactly `maxLen` (`MAXLEN = n`, slower) instead of about it. @default false */
  exactTrim?: boolean;
  /**
   * Entry id. `'auto'` lets the server pick one (`*`): NOT idempotent, a replay adds the entry
   * again. A function gives an explicit, strictly increasing id per stream (e.g. `offsetStreamId`):
   * a replay is refused by the server as "equal or smaller than the top item" and counted as
   * written, which makes the mapping idempotent.
   * @default 'auto'
   * @example offsetStreamId
   */
  id?: 'auto' | From<T, string>;
}

/**
 * A stream id derived from the record's source offset: `0-<offset + 1>` (ids must be above 0-0).
 * Strictly increasing within one source partition; give each partition its own stream key (or
 * never mix partitions in one stream), or later offsets of one partition would be refused as
 * replays after a higher offset of another.
 */
export function offsetStreamId(_record: unknown, meta: RecordMeta | undefined): string {
  if (meta?.offset === undefined) {
    throw invalidOption('meta.offset', 'a source offset for an offset-derived stream id', meta?.offset);
  }
  return `0-${BigInt(meta.offset) + 1n}`;
}

/** The reply to XADD with an id at or below the stream's last id. Source: Redis documentation, XADD. */
const STALE_ID = /^ERR The ID specified in XADD is equal or smaller than the target stream top item/;

/** `XADD key [MAXLEN ~ n] id|* f1 v1 …`. Idempotent only with an explicit `id`. */
export function streamEntry<T>(options: StreamEntryMapping<T>): RedisMapping<T> {
  const key = fn<From<T, string | Buffer>>('key', options?.key);
  const fields = fn<StreamEntryMapping<T>['fields']>('fields', options.fields);
  const { maxLen, exactTrim = false, id = 'auto' } = options;
  if (maxLen !== undefined && !(Number.isInteger(maxLen) && maxLen >= 0))
    throw invalidOption('maxLen', 'an integer >= 0', maxLen);
  if (typeof exactTrim !== 'boolean') throw invalidOption('exactTrim', 'a boolean', exactTrim);
  if (id !== 'auto' && typeof id !== 'function')
    throw invalidOption('id', "'auto' or a function returning a stream id", id);
  const trim: RedisArg[] = maxLen === undefined ? [] : ['MAXLEN', exactTrim ? '=' : '~', maxLen];
  const explicit = id !== 'auto';
  return {
    name: 'stream',
    idempotent: explicit,
    commands(record, meta): RedisCommand {
      const args: RedisArg[] = [key(record, meta), ...trim, explicit ? id(record, meta) : '*'];
      flatten(fields(record, meta), args);
      return ['XADD', ...args];
    },
    ...(explicit
      ? {
          isReplay(error: unknown): boolean {
            return error instanceof Error && error.name === 'ReplyError' && STALE_ID.test(error.message);
          },
        }
      : {}),
  };
}

// ------------------------------------------------------------------------------------ counter

export interface CounterMapping<T> {
  /** @example (r) => `tandem:dock:${r.dockId}:rentals` */
  key: From<T, string | Buffer>;
  /** The increment (an integer; negative decrements). @example (r) => 1 */
  by: From<T, number>;
  /** Hash field to count in (`HINCRBY`) instead of the key itself (`INCRBY`). @default undefined */
  field?: From<T, string | Buffer>;
  /**
   * Makes the counter idempotent: a marker key per record (e.g. from its source offset) is set
   * with `SET NX PX` in the same script as the increment, and a record whose marker exists is not
   * counted again. Costs one short-lived key per record; keep `ttlMs` longer than any replay.
   * With a cluster client, the marker must share the counter's slot (use a `{hash tag}`).
   * @default undefined (not idempotent: a replay counts twice)
   * @example { key: (r, m) => `tandem:seen:{${r.dockId}}:${m?.partition}:${m?.offset}`, ttlMs: 86_400_000 }
   */
  dedupe?: { key: From<T, string | Buffer>; ttlMs: number };
}

// KEYS[1] counter, KEYS[2] marker; ARGV[1] increment, ARGV[2] marker ttl, ARGV[3] hash field (optional).
const DEDUPED_INCREMENT = `if redis.call('SET', KEYS[2], '1', 'NX', 'PX', ARGV[2]) then
  if ARGV[3] then return redis.call('HINCRBY', KEYS[1], ARGV[3], ARGV[1]) end
  return redis.call('INCRBY', KEYS[1], ARGV[1])
end
return false`;

/**
 * `INCRBY key n` or `HINCRBY key field n`. NOT idempotent: a replay counts again. With `dedupe`
 * it runs a small script (`EVAL`) that counts each marker once, which makes it idempotent.
 */
export function counter<T>(options: CounterMapping<T>): RedisMapping<T> {
  const key = fn<From<T, string | Buffer>>('key', options?.key);
  const by = fn<From<T, number>>('by', options.by);
  const field =
    options.field === undefined ? undefined : fn<From<T, string | Buffer>>('field', options.field);
  const dedupe = options.dedupe;
  if (dedupe !== undefined) {
    fn('dedupe.key', dedupe?.key);
    if (!(Number.isInteger(dedupe.ttlMs) && dedupe.ttlMs > 0))
      throw invalidOption('dedupe.ttlMs', 'an integer > 0', dedupe.ttlMs);
  }
  return {
    name: 'counter',
    idempotent: dedupe !== undefined,
    scripted: dedupe !== undefined,
    commands(record, meta): RedisCommand {
      const n = by(record, meta);
      if (dedupe !== undefined) {
        const args: RedisArg[] = [
          DEDUPED_INCREMENT,
          2,
          key(record, meta),
          dedupe.key(record, meta),
          n,
          dedupe.ttlMs,
        ];
        if (field !== undefined) args.push(field(record, meta));
        return ['EVAL', ...args];
      }
      return field === undefined
        ? ['INCRBY', key(record, meta), n]
        : ['HINCRBY', key(record, meta), field(record, meta), n];
    },
  };
}

// ------------------------------------------------------------------------------------ custom

export interface CustomMapping<T> {
  /** @default 'custom' */
  name?: string;
  /** Whether a replay leaves the same data; decides the default of `onUnknownOutcome`. */
  idempotent: boolean;
  commands: RedisMapping<T>['commands'];
  isReplay?: RedisMapping<T>['isReplay'];
}

/** Any commands: the user says whether they are idempotent. */
export function commandMapping<T>(options: CustomMapping<T>): RedisMapping<T> {
  const commands = fn<RedisMapping<T>['commands']>('commands', options?.commands);
  if (typeof options.idempotent !== 'boolean')
    throw invalidOption('idempotent', 'a boolean', options.idempotent);
  const isReplay =
    options.isReplay === undefined
      ? undefined
      : fn<NonNullable<RedisMapping<T>['isReplay']>>('isReplay', options.isReplay);
  return {
    name: options.name ?? 'custom',
    idempotent: options.idempotent,
    commands,
    ...(isReplay ? { isReplay } : {}),
  };
}
