// Finds the shared PostgreSQL and Redis servers for the integration tests, starting the
// machine's own ones when they are down, and says what to install or set when that fails.
import { readdirSync } from 'node:fs';
import { Redis } from 'ioredis';
import pg from 'pg';
import { run, sleep } from './process.js';

export const DEFAULT_PG_URL = 'postgres://postgres@127.0.0.1:5432/test';
export const DEFAULT_REDIS_URL = 'redis://127.0.0.1:6379';

export interface ServiceUrls {
  pgUrl: string;
  redisUrl: string;
  /** Set when SPILLWAY_KAFKA_BROKERS names an external broker; the harness then starts none. */
  externalKafkaBrokers: string[] | undefined;
}

export function serviceUrlsFromEnv(env: NodeJS.ProcessEnv = process.env): ServiceUrls {
  const brokers = env.SPILLWAY_KAFKA_BROKERS?.split(',')
    .map((b) => b.trim())
    .filter((b) => b.length > 0);
  return {
    pgUrl: env.SPILLWAY_PG_URL || DEFAULT_PG_URL,
    redisUrl: env.SPILLWAY_REDIS_URL || DEFAULT_REDIS_URL,
    externalKafkaBrokers: brokers && brokers.length > 0 ? brokers : undefined,
  };
}

/** Resolves undefined when `select 1` works, else the error message. */
export async function probePostgres(url: string, timeoutMs = 3000): Promise<string | undefined> {
  const client = new pg.Client({ connectionString: url, connectionTimeoutMillis: timeoutMs });
  client.on('error', () => undefined);
  try {
    await client.connect();
    await client.query('select 1');
    return undefined;
  } catch (error) {
    return (error as Error).message || String(error);
  } finally {
    await client.end().catch(() => undefined);
  }
}

/** Resolves undefined when PING answers PONG, else the error message. */
export async function probeRedis(url: string, timeoutMs = 3000): Promise<string | undefined> {
  // No retries and no offline queue: a probe must fail fast instead of waiting for a server.
  const redis = new Redis(url, {
    lazyConnect: true,
    connectTimeout: timeoutMs,
    maxRetriesPerRequest: 0,
    enableOfflineQueue: false,
    retryStrategy: () => null,
  });
  // The rejection only says "Connection is closed."; the socket error says why (ECONNREFUSED...).
  let socketError: string | undefined;
  redis.on('error', (e: Error) => {
    socketError ??= e.message;
  });
  try {
    await redis.connect();
    const reply = await redis.ping();
    return reply === 'PONG' ? undefined : `unexpected PING reply ${reply}`;
  } catch (error) {
    return socketError ?? ((error as Error).message || String(error));
  } finally {
    redis.disconnect();
  }
}

function isLocal(url: string): boolean {
  try {
    const host = new URL(url).hostname;
    return host === '127.0.0.1' || host === 'localhost' || host === '[::1]' || host === '';
  } catch {
    return false;
  }
}

/** Newest PostgreSQL major version installed from Debian's packages, if any. */
export function localPostgresVersion(): string | undefined {
  try {
    return readdirSync('/etc/postgresql')
      .filter((v) => /^\d+$/.test(v))
      .sort((a, b) => Number(b) - Number(a))[0];
  } catch {
    return undefined;
  }
}

async function retryProbe(
  probe: () => Promise<string | undefined>,
  tries: number,
): Promise<string | undefined> {
  let error: string | undefined;
  for (let i = 0; i < tries; i++) {
    error = await probe();
    if (error === undefined) return undefined;
    await sleep(500);
  }
  return error;
}

/**
 * Checks the PostgreSQL server; when it is the machine's own (the default loopback URL) and does
 * not answer, starts the Debian cluster and checks again. A server named through
 * SPILLWAY_PG_URL is the user's to run: it is only checked.
 */
export async function ensurePostgres(url: string, mayStart = url === DEFAULT_PG_URL): Promise<void> {
  let error = await probePostgres(url);
  if (error === undefined) return;
  const version = localPostgresVersion();
  if (mayStart && isLocal(url) && version !== undefined) {
    process.stderr.write(
      `[spillway] PostgreSQL at ${url} did not answer (${error}); starting cluster ${version}/main\n`,
    );
    await run('pg_ctlcluster', ['--skip-systemctl-redirect', version, 'main', 'start'], {
      timeoutMs: 60_000,
    }).catch((e: Error) => process.stderr.write(`[spillway] pg_ctlcluster: ${e.message}\n`));
    error = await retryProbe(() => probePostgres(url), 20);
    if (error === undefined) return;
  }
  throw new Error(
    `PostgreSQL is not reachable at ${url} (${error}). Install and start PostgreSQL ` +
      '(Debian: apt-get install postgresql, with trust auth for 127.0.0.1 and a database named "test"), ' +
      'or set SPILLWAY_PG_URL to a server the tests may create schemas in.',
  );
}

/**
 * Checks the Redis server; when it is the machine's own (the default loopback URL) and does not
 * answer, starts redis-server the way the machine does and checks again.
 */
export async function ensureRedis(url: string, mayStart = url === DEFAULT_REDIS_URL): Promise<void> {
  let error = await probeRedis(url);
  if (error === undefined) return;
  if (mayStart && isLocal(url)) {
    const port = new URL(url).port || '6379';
    process.stderr.write(
      `[spillway] Redis at ${url} did not answer (${error}); starting redis-server on ${port}\n`,
    );
    await run(
      'redis-server',
      ['--daemonize', 'yes', '--bind', '127.0.0.1', '--port', port, '--save', '', '--appendonly', 'no'],
      { timeoutMs: 30_000 },
    ).catch((e: Error) => process.stderr.write(`[spillway] redis-server: ${e.message}\n`));
    error = await retryProbe(() => probeRedis(url), 20);
    if (error === undefined) return;
  }
  throw new Error(
    `Redis is not reachable at ${url} (${error}). Install and start Redis 7 ` +
      '(Debian: apt-get install redis-server), or set SPILLWAY_REDIS_URL to a server the tests may write keys to.',
  );
}
