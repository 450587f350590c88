// A consumer process for the Kafka-to-Kafka exactly-once tests: a KafkaBridge in a consumer group
// reading dock events and writing them, enriched with their source coordinates, to an output topic
// through the transactional sink (one Kafka transaction per source partition and batch, with the
// consumed offsets). The shutdown coordinator is installed, so a test can SIGTERM it (exit 143)
// or SIGKILL it mid-transaction.
//
// Run: TSX_TSCONFIG_PATH=test/integration/workers/tsconfig.json node --import tsx \
//        test/integration/workers/kafka-eos-worker.ts   with BRIDGE_WORKER='{"brokers":[…],…}'
// Prints one JSON object per line on stdout: {"event":"ready"|"assign"|"stats"|"error", …}.
import { fileDeadLetter, installShutdown, Sink } from '@spillway/core';
import { KafkaBridge, kafkaTransactionalAdapter } from '@spillway/kafka';
import { Kafka, logLevel } from 'kafkajs';
import { type DockRow, decodeDockEvent } from './dock-rows.js';

export interface KafkaEosWorkerConfig {
  label: string;
  brokers: string[];
  inputTopic: string;
  outputTopic: string;
  groupId: string;
  transactionalIdPrefix: string;
  deadLetterPath: string;
  /** The bridge's commitIntervalMs (its own group's commits, for lag only). @default 300 */
  commitIntervalMs?: number;
  /** The sink's maxRecords. @default 1000 */
  maxRecords?: number;
  /** The consumer's sessionTimeout: how long a stopped member keeps its partitions. @default 10000 */
  sessionTimeoutMs?: number;
}

/** What the worker writes to the output topic for each dock event. */
export interface EnrichedDockEvent extends DockRow {
  /** The source topic, so that a reader can tie each output message to one input message. */
  source: string;
}

const config = JSON.parse(process.env.BRIDGE_WORKER ?? '{}') as KafkaEosWorkerConfig;
const out = (event: string, data: Record<string, unknown> = {}) =>
  process.stdout.write(
    `${JSON.stringify({ event, label: config.label, pid: process.pid, t: Date.now(), ...data })}\n`,
  );

const shutdown = installShutdown({
  timeoutMs: 20_000,
  log: (line) => process.stderr.write(`[${config.label}] ${line}\n`),
});
const kafka = new Kafka({
  clientId: config.label,
  brokers: config.brokers,
  logLevel: logLevel.NOTHING,
  retry: { retries: 10, initialRetryTime: 100, maxRetryTime: 3000 },
});
const adapter = kafkaTransactionalAdapter<DockRow>({
  kafka,
  group: config.groupId,
  transactionalIdPrefix: config.transactionalIdPrefix,
  topic: config.outputTopic,
  mapper: (row, meta) => ({
    key: row.dock,
    value: JSON.stringify({ ...row, source: meta?.topic ?? '' } satisfies EnrichedDockEvent),
  }),
});
const sink = new Sink<DockRow>(adapter, {
  name: 'enriched',
  maxRecords: config.maxRecords ?? 1000,
  maxAgeMs: 200,
  // A transaction that fails is retried (a new producer fences, reads what is stored); a broker
  // that is away must not move good records to the dead letter.
  retry: { maxAttempts: Number.POSITIVE_INFINITY, baseDelayMs: 100, maxDelayMs: 2000, maxElapsedMs: 300_000 },
  deadLetter: fileDeadLetter(`${config.deadLetterPath}.enriched`),
});
shutdown.addSink(sink);

const bridge = new KafkaBridge<DockRow>({
  kafka,
  groupId: config.groupId,
  consumerConfig: {
    sessionTimeout: config.sessionTimeoutMs ?? 10_000,
    rebalanceTimeout: 20_000,
    heartbeatInterval: 500,
    maxWaitTimeInMs: 200,
  },
  topics: [config.inputTopic],
  fromBeginning: true,
  decode: decodeDockEvent,
  route: () => sink,
  deadLetter: fileDeadLetter(config.deadLetterPath),
  commitIntervalMs: config.commitIntervalMs ?? 300,
  offsetStores: [{ sink, store: adapter }],
  rebalanceFlushMs: 4000,
  shutdown,
  name: config.label,
});

bridge.on('assign', (e) => out('assign', { assigned: e.assigned, revoked: e.revoked, kept: e.kept }));
bridge.on('error', (e) => out('error', { fatal: e.fatal, message: (e.error as Error)?.message }));
sink.on('retry', (e) => out('retry', { attempt: e.attempt, message: (e.error as Error)?.message }));

const printStats = () => {
  const s = bridge.snapshot();
  out('stats', {
    messages: s.messages,
    commits: s.commits,
    skippedStored: s.skippedStored,
    written: sink.snapshot().written,
    sink: adapter.stats(),
  });
};
const stats = setInterval(printStats, 500);
stats.unref();
shutdown.add('sources', 'stats', () => clearInterval(stats));
shutdown.add('clients', 'final stats', printStats);

await bridge.start();
out('ready');
