/**
 * Reading Redis and ioredis errors as retry / split / fatal.
 * Source: Redis documentation, "Redis error replies" (the first word of an error reply is its
 * prefix: LOADING, BUSY, TRYAGAIN, MOVED, ASK, WRONGTYPE, NOAUTH, NOPERM, …).
 */
import { type ErrorClass, SpillwayError } from '@spillway/core';
import { isSocketError } from '@spillway/core/kit';

/** Transient server states: the same command succeeds later. */
const RETRY_PREFIXES: ReadonlySet<string> = new Set([
  'LOADING', // the server is loading its dataset after a restart
  'BUSY', // a script or function is running
  'TRYAGAIN', // a multi-key command during slot migration
  'CLUSTERDOWN',
  'MASTERDOWN',
  'READONLY', // a failover made this node a replica; the client reconnects to the new primary
  'MOVED', // normally followed by ioredis' cluster client; seen here only when it gave up
  'ASK',
  'OOM', // maxmemory reached: eviction or consumers may free memory
  'NOREPLICAS',
  'NOTBUSY',
]);

/** Misconfiguration: no retry and no other record will do better. */
const FATAL_PREFIXES: ReadonlySet<string> = new Set([
  'NOAUTH',
  'NOPERM',
  'WRONGPASS',
  'NOPROTO',
  'CROSSSLOT',
  'NOSCRIPT',
]);

/** ioredis messages for commands that were never sent (safe to send again). */
const NOT_SENT = /^(Connection is closed|Stream isn't writeable|Reached the max retries per request limit)/;

function field(error: unknown, name: string): unknown {
  return typeof error === 'object' && error !== null ? (error as Record<string, unknown>)[name] : undefined;
}

/** The prefix of a Redis error reply: its leading word of capital letters, e.g. `WRONGTYPE`. */
export function redisErrorPrefix(error: unknown): string | undefined {
  if (error instanceof SpillwayError) return error.driverCode ?? redisErrorPrefix(error.cause);
  if (field(error, 'name') !== 'ReplyError') return undefined;
  const match = /^([A-Z][A-Z_]*)\b/.exec(String(field(error, 'message') ?? ''));
  return match?.[1];
}

/**
 * Whether an error leaves it unknown if the command ran: the connection closed after the command
 * was sent (ioredis' AbortError), or the client's `commandTimeout` expired. Replies that never
 * arrived do not mean the server did not execute the command.
 */
export function isUnknownOutcome(error: unknown): boolean {
  let e: unknown = error;
  for (let i = 0; i < 4 && e !== undefined && e !== null; i++) {
    if (e instanceof SpillwayError && e.details.outcome === 'unknown') return true;
    const name = field(e, 'name');
    const message = String(field(e, 'message') ?? '');
    // MaxRetriesPerRequestError is an AbortError too, but it flushes commands that were never sent.
    if (name === 'AbortError' && !/max retries per request/i.test(message)) return true;
    if (name === 'MaxRetriesPerRequestError') return false;
    if (message === 'Command timed out') return true;
    e = field(e, 'cause');
  }
  return false;
}

export interface RedisClassifyOptions {
  /**
   * What an unknown outcome (see `isUnknownOutcome`) becomes: `retry` (safe for idempotent
   * mappings) or `split` (the record is dead-lettered so that a non-idempotent command is never
   * applied twice by the sink).
   * @default 'retry'
   */
  unknownOutcome?: 'retry' | 'split';
}

/**
 * Classifies a Redis / ioredis error:
 * - `retry`: LOADING, BUSY, TRYAGAIN, CLUSTERDOWN, MASTERDOWN, READONLY, MOVED/ASK, OOM; lost
 *   connections, refused connections, commands flushed unsent; unknown outcomes by default.
 * - `fatal`: NOAUTH, NOPERM, WRONGPASS, CROSSSLOT, NOSCRIPT, `ERR unknown command`, a command a
 *   script may not call, a client that was ended, and errors that are not from Redis (bugs).
 * - `split`: any other error reply (WRONGTYPE, `ERR value is not an integer`, EXECABORT, …): the
 *   data of some record is wrong for its key; bisecting isolates it and it is dead-lettered.
 */
export function classifyRedisError(error: unknown, options: RedisClassifyOptions = {}): ErrorClass {
  if (isUnknownOutcome(error)) return options.unknownOutcome ?? 'retry';
  const prefix = redisErrorPrefix(error);
  const inner = error instanceof SpillwayError && error.cause !== undefined ? error.cause : error;
  if (field(inner, 'name') === 'ReplyError' && prefix !== undefined) {
    if (RETRY_PREFIXES.has(prefix)) return 'retry';
    if (FATAL_PREFIXES.has(prefix)) return 'fatal';
    const message = String(field(inner, 'message') ?? '');
    if (
      /^ERR unknown command/i.test(message) ||
      /^ERR wrong number of arguments/i.test(message) ||
      // A command a script may not call (e.g. inside the script of `storeOffsets`).
      /^ERR This Redis command is not allowed from script/i.test(message)
    )
      return 'fatal';
    if (prefix === 'EXECABORT') {
      // A queue-time error: the causes tell whether it was the data or the command itself.
      const previous = field(inner, 'previousErrors');
      if (Array.isArray(previous) && previous.length > 0) {
        const classes = previous.map((p) => classifyRedisError(p, options));
        if (classes.includes('fatal')) return 'fatal';
        // e.g. OOM while queueing: the server state, not the data.
        if (classes.every((c) => c === 'retry')) return 'retry';
      }
    }
    return 'split';
  }
  const message = String(field(inner, 'message') ?? '');
  if (NOT_SENT.test(message)) return 'retry';
  if (field(inner, 'name') === 'MaxRetriesPerRequestError') return 'retry';
  const code = field(inner, 'code');
  if (isSocketError(code)) return 'retry';
  // Cluster topology errors: a slot moved between grouping and sending, or the slots are being refreshed.
  if (
    /Failed to refresh slots cache|None of startup nodes is available|Too many Cluster redirections|should belong to the same slots? allocation group|Cluster isn't ready/.test(
      message,
    )
  ) {
    return 'retry';
  }
  return 'fatal';
}
