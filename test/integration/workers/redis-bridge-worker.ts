// A consumer process for the Redis exactly-once tests: a KafkaBridge in a consumer group appending
// dock events to one Redis list (RPUSH) or stream (XADD with server-made ids), neither of which is
// idempotent, with the offsets stored in the same script as each batch (`storeOffsets`). The
// process-wide shutdown coordinator is installed, so a test can SIGTERM it (exit 143) or SIGKILL it.
//
// Run: TSX_TSCONFIG_PATH=test/integration/workers/tsconfig.json node --import tsx \
//        test/integration/workers/redis-bridge-worker.ts   with BRIDGE_WORKER='{"brokers":[…],…}'
// Prints one JSON object per line on stdout, as bridge-worker.ts does.
import { fileDeadLetter, Sink } from '@spillway/core';
import { KafkaBridge } from '@spillway/kafka';
import { commandMapping, redisAdapter, streamEntry } from '@spillway/redis';
import { Redis } from 'ioredis';
import { Kafka, logLevel } from 'kafkajs';
import { type DockRow, decodeDockEvent } from './dock-rows.js';
import { groupTimers, reportBridge, workerProcess } from './worker-process.js';

export interface RedisWorkerConfig {
  label: string;
  brokers: string[];
  topic: string;
  groupId: string;
  redisUrl: string;
  /** Where the events go: a list (one JSON element per event) or a stream (one entry per event). */
  layout: 'list' | 'stream';
  /** The list or stream key. */
  dataKey: string;
  /** The hash of stored offsets (`storeOffsets.key`). */
  offsetsKey: string;
  deadLetterPath: string;
  /** The bridge's commitIntervalMs. @default 300 */
  commitIntervalMs?: number;
  maxRecords?: number;
  maxAgeMs?: number;
}

const { config, out, shutdown } = workerProcess<RedisWorkerConfig>();
// Named after the worker, so that a test can see when the server has dropped its connection.
const redis = new Redis(config.redisUrl, { connectionName: config.label });
redis.on('error', () => undefined);

const mapping =
  config.layout === 'list'
    ? commandMapping<DockRow>({
        name: 'dock-list',
        idempotent: false,
        commands: (r) => [
          'RPUSH',
          config.dataKey,
          JSON.stringify({ seq: r.seq, p: r.partition, o: r.offset }),
        ],
      })
    : streamEntry<DockRow>({
        key: () => config.dataKey,
        fields: (r) => ({ seq: r.seq, dock: r.dock, p: r.partition, o: r.offset }),
      });
const adapter = redisAdapter<DockRow>({
  client: redis,
  mapping,
  storeOffsets: { group: config.groupId, key: config.offsetsKey },
});
const sink = new Sink<DockRow>(adapter, {
  name: config.dataKey,
  maxRecords: config.maxRecords ?? 1000,
  maxAgeMs: config.maxAgeMs ?? 200,
  deadLetter: fileDeadLetter(`${config.deadLetterPath}.sink`),
});
shutdown.addSink(sink);

const kafka = new Kafka({ clientId: config.label, brokers: config.brokers, logLevel: logLevel.NOTHING });
const bridge = new KafkaBridge<DockRow>({
  kafka,
  groupId: config.groupId,
  consumerConfig: groupTimers(),
  topics: [config.topic],
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
shutdown.add('clients', 'redis', async () => {
  await redis.quit().catch(() => redis.disconnect());
});

reportBridge(bridge, { out, shutdown }, () => {
  const s = bridge.snapshot();
  const a = adapter.stats();
  return {
    messages: s.messages,
    commits: s.commits,
    skippedStored: s.skippedStored,
    offsetConflicts: a.offsetConflicts,
    alreadyStored: a.alreadyStored,
    deadLettered: sink.snapshot().deadLettered,
  };
});

await bridge.start();
out('ready');
