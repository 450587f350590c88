/**
 * Commands as the adapter sends them, and the mapping contract from a record to its commands.
 */
import type { RecordMeta } from '@spillway/core';

/** One argument of a Redis command. Buffers are sent byte for byte (binary safe). */
export type RedisArg = string | Buffer | number;

/**
 * One command: its name, then its arguments. The first argument is the command's key: the
 * adapter uses it to group commands by cluster slot (every ready-made mapping follows this; a
 * custom command whose first argument is not its key must not be used with a cluster client).
 * @example ['SET', 'dock:17:free', '4', 'PX', 60000]
 */
export type RedisCommand = readonly [command: string, ...args: RedisArg[]];

/** How a record becomes Redis commands. */
export interface RedisMapping<T> {
  /** Short name used in error messages, e.g. `string-ttl`. */
  readonly name: string;
  /**
   * True when writing the same record twice leaves the same data as writing it once. It decides
   * what the adapter does when the outcome of a write is unknown (see `onUnknownOutcome`).
   */
  readonly idempotent: boolean;
  /**
   * True when the commands run a script (`EVAL`, `EVALSHA`, `FCALL`): they cannot go inside the
   * script `storeOffsets` sends a batch as (Redis does not let a script call another).
   */
  readonly scripted?: boolean;
  /** The command(s) for one record, in the order they must run. */
  commands(record: T, meta: RecordMeta | undefined): RedisCommand | readonly RedisCommand[];
  /**
   * True when a reply error means the command had already run for this record (a replay), so
   * the record counts as written. Used by idempotent variants that rely on the server refusing
   * a repeat, such as XADD with an explicit id.
   */
  isReplay?(error: unknown, command: RedisCommand): boolean;
}

/** Normalises what `commands()` returned to a list. */
export function commandList<T>(
  mapping: RedisMapping<T>,
  record: T,
  meta: RecordMeta | undefined,
): readonly RedisCommand[] {
  const out = mapping.commands(record, meta);
  // One command is an array whose first element is the command name (a string).
  return typeof out[0] === 'string' ? [out as RedisCommand] : (out as readonly RedisCommand[]);
}
