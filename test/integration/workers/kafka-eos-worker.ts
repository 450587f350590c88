// A consumer process for the Kafka-to-Kafka exactly-once tests: a KafkaBridge in a consumer group
// reading dock events and writing them, enriched with their source coordinates, to an output topic
// through the transactional sink (one Kafka transaction per source partition and batch, with the
// consumed offsets). The shutdown coordinator is installed, so a test can SIGTERM it (exit 143)
// or SIGKILL it mid-transaction.
//
// Run: TSX_TSCONFIG_PATH=test/integration/workers/tsconfig.json node --import tsx \
//        test/integration/workers/kafka-eos-worker.ts   with BRIDGE_WORKER='{"brokers":[…],…}'
// Prints one JSON object per line on stdout: {"event":"ready"|"assign"|"stats"|"error", …}.
import { fileDeadLetter, Sink } from '@spillway/core';
import { KafkaBridge, kafkaTransactionalAdapter } from '@spillway/kafka';
import { Kafka, logLevel } from 'kafkajs';
import { type DockRow, decodeDockEvent } from './dock-rows.js';
import { groupTimers, reportBridge, workerProcess } from './worker-process.js';

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

const { config, out, shutdown } = workerProcess<KafkaEosWorkerConfig>();
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
  consumerConfig: groupTimers(config.sessionTimeoutMs),
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

sink.on('retry', (e) => out('retry', { attempt: e.attempt, message: (e.error as Error)?.message }));

reportBridge(bridge, { out, shutdown }, () => {
  const s = bridge.snapshot();
  return {
    messages: s.messages,
    commits: s.commits,
    skippedStored: s.skippedStored,
    written: sink.snapshot().written,
    sink: adapter.stats(),
  };
});

await bridge.start();
out('ready');
