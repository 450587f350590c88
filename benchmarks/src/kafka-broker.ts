/** A broker the Kafka benchmarks write to. */
export interface BrokerHandle {
  brokers: string[];
  version: string;
}

/**
 * The Kafka brokers named by SPILLWAY_KAFKA_BROKERS (comma-separated host:port). The benchmarks
 * start no broker of their own: run one (the test harness's `startKafka()` starts a private one,
 * see test/harness/README.md) and name it here.
 */
export function kafkaBrokers(env: NodeJS.ProcessEnv = process.env): BrokerHandle {
  const brokers = (env.SPILLWAY_KAFKA_BROKERS ?? '')
    .split(',')
    .map((s) => s.trim())
    .filter(Boolean);
  if (brokers.length === 0)
    throw new TypeError(
      'Expected SPILLWAY_KAFKA_BROKERS to name a Kafka broker (host:port[,host:port]); the Kafka benchmarks start none',
    );
  return { brokers, version: 'external (SPILLWAY_KAFKA_BROKERS)' };
}
