// Vitest globalSetup for the `integration` project: makes sure PostgreSQL and Redis answer,
// starts one shared Kafka broker for the whole run (unless SPILLWAY_KAFKA_BROKERS names one),
// and hands the addresses to the test files through `provide` / `inject('services')`.
import type { TestProject } from 'vitest/node';
import { ensureKafkaJars, KAFKA_VERSION, type KafkaBroker, startKafka } from './kafka.js';
import { ensurePostgres, ensureRedis, serviceUrlsFromEnv } from './services.js';

export interface ProvidedServices {
  pgUrl: string;
  redisUrl: string;
  kafkaBrokers: string[];
}

declare module 'vitest' {
  interface ProvidedContext {
    services: ProvidedServices;
  }
}

const seconds = (ms: number) => `${(ms / 1000).toFixed(1)} s`;

export default async function setup(project: TestProject): Promise<() => Promise<void>> {
  const urls = serviceUrlsFromEnv();
  // Report every missing server at once, not just the first.
  const checks = await Promise.allSettled([ensurePostgres(urls.pgUrl), ensureRedis(urls.redisUrl)]);
  const problems = checks.flatMap((c) => (c.status === 'rejected' ? [(c.reason as Error).message] : []));
  if (problems.length > 0)
    throw new Error(`integration test services are missing:\n- ${problems.join('\n- ')}`);

  let broker: KafkaBroker | undefined;
  let kafkaBrokers = urls.externalKafkaBrokers;
  if (kafkaBrokers === undefined) {
    // Timed apart: fetching the jars (cold cache, Maven) dwarfs the JVM start.
    const jarsStarted = Date.now();
    const { fetched } = await ensureKafkaJars();
    const jarsMs = Date.now() - jarsStarted;
    broker = await startKafka({ label: 'shared' });
    kafkaBrokers = broker.brokers;
    process.stderr.write(
      `[spillway] Kafka ${KAFKA_VERSION} on ${kafkaBrokers.join(',')}: ${fetched ? 'cold' : 'warm'} start, ` +
        `jars ${fetched ? `fetched in ${seconds(jarsMs)}` : 'cached'}, broker ready in ${seconds(broker.lastStartMs)} ` +
        `(log: ${broker.logFile})\n`,
    );
  } else {
    process.stderr.write(
      `[spillway] using external Kafka ${kafkaBrokers.join(',')} (SPILLWAY_KAFKA_BROKERS)\n`,
    );
  }

  project.provide('services', { pgUrl: urls.pgUrl, redisUrl: urls.redisUrl, kafkaBrokers });

  return async () => {
    await broker?.stop();
  };
}
