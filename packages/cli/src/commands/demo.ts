import { installShutdown, messageOf } from '@spillway/core';
import { type Command, InvalidArgumentError } from 'commander';
import { DEMO_DEFAULTS, type DemoOptions } from '../demo/options.js';

function positiveNumber(value: string): number {
  const n = Number(value);
  if (!Number.isFinite(n) || n <= 0) throw new InvalidArgumentError('expected a number > 0');
  return n;
}

function integer(value: string): number {
  const n = Number(value);
  if (!Number.isInteger(n)) throw new InvalidArgumentError('expected an integer');
  return n;
}

/** Registers `spillway demo`. */
export function registerDemo(program: Command): void {
  program
    .command('demo')
    .description(
      'Run the Tandem Bikes scenario end to end: dock events through batching sinks into PostgreSQL ' +
        '(embedded when no URL is given), and Redis / Kafka when given; live view, then a summary that counts what landed.',
    )
    .option(
      '--postgres <url>',
      'PostgreSQL URL (env SPILLWAY_POSTGRES_URL); without one an embedded PostgreSQL is started',
    )
    .option('--redis <url>', 'Redis URL for live availability per dock (env SPILLWAY_REDIS_URL)')
    .option(
      '--kafka <brokers>',
      'Kafka brokers, comma-separated, for the enriched events topic (env SPILLWAY_KAFKA_BROKERS)',
    )
    .option(
      '--duration <seconds>',
      'length of the simulated day',
      positiveNumber,
      DEMO_DEFAULTS.durationMs / 1000,
    )
    .option(
      '--rate <multiplier>',
      'multiplies every event rate (rush hour is 2,400 events/s at 1)',
      positiveNumber,
      DEMO_DEFAULTS.rate,
    )
    .option('--seed <n>', 'seed of the event generator', integer, DEMO_DEFAULTS.seed)
    .option(
      '--schema <name>',
      'PostgreSQL schema of the demo table (recreated each run)',
      DEMO_DEFAULTS.schema,
    )
    .option('--redis-prefix <prefix>', 'prefix of the Redis keys', DEMO_DEFAULTS.redisPrefix)
    .option(
      '--kafka-topic <topic>',
      'Kafka topic for enriched events (created when missing)',
      DEMO_DEFAULTS.kafkaTopic,
    )
    .option(
      '--metrics-port <port>',
      'serve Prometheus metrics on 127.0.0.1:<port>/metrics while running',
      integer,
    )
    .option(
      '--plain',
      'print plain progress lines instead of the live view (the default when not a terminal)',
    )
    .action(async (flags: Record<string, unknown>) => {
      const env = process.env;
      const kafka = (flags.kafka as string | undefined) ?? env.SPILLWAY_KAFKA_BROKERS;
      const options: DemoOptions = {
        postgresUrl: (flags.postgres as string | undefined) ?? env.SPILLWAY_POSTGRES_URL,
        redisUrl: (flags.redis as string | undefined) ?? env.SPILLWAY_REDIS_URL,
        kafkaBrokers: kafka
          ? kafka
              .split(',')
              .map((b) => b.trim())
              .filter(Boolean)
          : undefined,
        durationMs: (flags.duration as number) * 1000,
        rate: flags.rate as number,
        seed: flags.seed as number,
        schema: flags.schema as string,
        redisPrefix: flags.redisPrefix as string,
        kafkaTopic: flags.kafkaTopic as string,
        metricsPort: flags.metricsPort as number | undefined,
        view: flags.plain ? 'plain' : 'auto',
      };
      // The demo's stores and drivers load when it runs, not when `spillway` starts.
      const { demoOutput, runDemo } = await import('../demo/run-demo.js');
      const out = demoOutput(process.stdout);
      const coordinator = installShutdown({ log: (line) => out.log(line), timeoutMs: 20_000 });
      let code = 1;
      try {
        const result = await runDemo(options, coordinator, out);
        code = result.ok ? 0 : 1;
      } catch (error) {
        out.view?.stop();
        out.view = undefined;
        out.log(`spillway demo: ${messageOf(error)}`);
        await coordinator.shutdown('error');
      }
      // kafkajs and pg may keep sockets half-open for a while; the demo is done.
      process.stdout.write('', () => process.exit(code));
    });
}
