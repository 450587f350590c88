// A consumer process for the bridge tests: a KafkaBridge in a consumer group writing dock events
// into PostgreSQL tables, with the process-wide shutdown coordinator installed, so that a test can
// SIGTERM it (graceful: stop fetching → flush → commit → disconnect, exit 143) or SIGKILL it.
//
// Run: TSX_TSCONFIG_PATH=test/integration/workers/tsconfig.json node --import tsx \
//        test/integration/workers/bridge-worker.ts   with BRIDGE_WORKER='{"brokers":[…],…}'
// Prints one JSON object per line on stdout: {"event":"ready"|"assign"|"stats"|"commit", …}.
import { fileDeadLetter, Sink } from '@spillway/core';
import { KafkaBridge } from '@spillway/kafka';
import { Kafka, logLevel } from 'kafkajs';
import pg from 'pg';
import { type DockRow, decodeDockEvent, pgRowsAdapter, type WriteMode } from './dock-rows.js';
import { groupTimers, reportBridge, workerProcess } from './worker-process.js';

export interface WorkerConfig {
  label: string;
  brokers: string[];
  topic: string;
  groupId: string;
  pgUrl: string;
  tables: Array<{ table: string; mode: WriteMode | 'copy' }>;
  /** Store offsets with the rows and skip what is stored on assignment (exactly-once). */
  exactlyOnce?: boolean;
  /** The bridge's commitIntervalMs. @default 300 */
  commitIntervalMs?: number;
  deadLetterPath: string;
  maxRecords?: number;
  maxAgeMs?: number;
  /** The sinks' `maxPendingRecords` (small: the bridge runs out of room soon when writes stall). */
  maxPendingRecords?: number;
  /** The bridge's `pauseAfterMs`. */
  pauseAfterMs?: number;
  /** Print every commit (for the kill -9 test, which compares them with the rows). */
  logCommits?: boolean;
}

const { config, out, shutdown } = workerProcess<WorkerConfig>();
// Named after the worker, so that a test can see when the server has ended its sessions.
const pool = new pg.Pool({
  connectionString: config.pgUrl,
  max: config.tables.length + 1,
  application_name: config.label,
});
pool.on('error', () => undefined);

const adapters = config.tables.map(({ table, mode }) =>
  pgRowsAdapter(pool, table, mode, config.exactlyOnce ? { storeOffsetsFor: config.groupId } : {}),
);
const sinks = config.tables.map(
  ({ table }, i) =>
    new Sink<DockRow>(adapters[i]!, {
      name: table,
      maxRecords: config.maxRecords ?? 1000,
      maxAgeMs: config.maxAgeMs ?? 200,
      ...(config.maxPendingRecords === undefined ? {} : { maxPendingRecords: config.maxPendingRecords }),
      deadLetter: fileDeadLetter(`${config.deadLetterPath}.${table}`),
    }),
);
for (const s of sinks) shutdown.addSink(s);

const kafka = new Kafka({ clientId: config.label, brokers: config.brokers, logLevel: logLevel.NOTHING });
const bridge = new KafkaBridge<DockRow>({
  kafka,
  groupId: config.groupId,
  consumerConfig: groupTimers(),
  topics: [config.topic],
  fromBeginning: true,
  decode: decodeDockEvent,
  route: () => sinks,
  deadLetter: fileDeadLetter(config.deadLetterPath),
  commitIntervalMs: config.commitIntervalMs ?? 300,
  ...(config.exactlyOnce
    ? {
        offsetStores: sinks.map((sink, i) => {
          const read = adapters[i]!.storedOffsets;
          if (read === undefined) throw new Error('the adapter does not store offsets');
          return { sink, store: { storedOffsets: read.bind(adapters[i]) } };
        }),
      }
    : {}),
  rebalanceFlushMs: 4000,
  ...(config.pauseAfterMs === undefined ? {} : { pauseAfterMs: config.pauseAfterMs }),
  shutdown,
  name: config.label,
});
shutdown.add('clients', 'pg pool', () => pool.end());

if (config.logCommits) bridge.on('commit', (e) => out('commit', { offsets: e.offsets }));

reportBridge(bridge, { out, shutdown }, () => {
  const s = bridge.snapshot();
  return {
    messages: s.messages,
    commits: s.commits,
    skipped: s.skippedRedeliveries,
    flushes: s.rebalanceFlushes,
    flushTimeouts: s.rebalanceFlushTimeouts,
    uncommittedAtRevoke: s.uncommittedAtRevoke,
    skippedStored: s.skippedStored,
    pauses: s.pauses,
    paused: s.partitions.filter((p) => p.paused).length,
    held: s.partitions.reduce((n, p) => n + p.heldMessages, 0),
    // The PostgreSQL adapters' own counters (failed writes, offset conflicts, resolved commits).
    adapters: adapters.map((a) => (a as { stats?: () => unknown }).stats?.()),
  };
});

await bridge.start();
out('ready');
