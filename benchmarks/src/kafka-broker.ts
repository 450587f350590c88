import { fileURLToPath } from 'node:url';

/** A broker the suite can write to, and how to stop it when the suite started it. */
export interface BrokerHandle {
  brokers: string[];
  version: string;
  stop(): Promise<void>;
}

/**
 * The Kafka brokers for the Kafka cells: SPILLWAY_KAFKA_BROKERS when set, otherwise a private
 * broker started with the test harness's `startKafka()` (loaded from its TypeScript source
 * through tsx, since the harness is not a built package).
 */
export async function kafkaBrokers(env: NodeJS.ProcessEnv = process.env): Promise<BrokerHandle> {
  const external = env.SPILLWAY_KAFKA_BROKERS?.split(',')
    .map((s) => s.trim())
    .filter(Boolean);
  if (external && external.length > 0)
    return { brokers: external, version: 'external (SPILLWAY_KAFKA_BROKERS)', stop: async () => {} };
  const { tsImport } = (await import('tsx/esm/api')) as {
    tsImport: (specifier: string, parent: string) => Promise<unknown>;
  };
  const harness = fileURLToPath(new URL('../../test/harness/kafka.ts', import.meta.url));
  const mod = (await tsImport(harness, import.meta.url)) as {
    startKafka: (o?: { label?: string }) => Promise<{ brokers: string[]; stop(): Promise<void> }>;
    KAFKA_VERSION: string;
  };
  const broker = await mod.startKafka({ label: 'bench' });
  return { brokers: broker.brokers, version: `Apache Kafka ${mod.KAFKA_VERSION}`, stop: () => broker.stop() };
}
