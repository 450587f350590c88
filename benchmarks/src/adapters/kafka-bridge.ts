// Consumer bridge throughput, topic → PostgreSQL (COPY mode), side by side in one run with its two
// limits:
// - source: kafkajs consuming the same topic in a fresh group and discarding every message;
// - store:  Sink + postgresAdapter (copy) writing the same rows, already decoded, from memory;
// - bridge: KafkaBridge in a fresh group decoding each message and writing it through the same
//           sink configuration, until every row is durable.
// Each is timed from its first message (or row) to its last one seen (source) or durable (store,
// bridge), so group-join time is left out of all three alike. The order of the three rotates per
// repeat. Target: bridge ≥ 0.8 × min(source, store).
// Run: npx tsc --build && node benchmarks/dist/adapters/kafka-bridge.js
//      [--messages 200000] [--repeats 3] [--partitions 6] [--batch 5000] [--fetch-bytes 0]
//      SPILLWAY_KAFKA_BROKERS (default: a private broker started through the test harness),
//      SPILLWAY_PG_URL (default postgres://postgres@127.0.0.1:5432/test).
// Nothing here asserts a time: it prints samples, medians, spreads and ratios.
import { randomBytes } from 'node:crypto';
import { parseArgs } from 'node:util';
import { Sink, type SinkOptions } from '@spillway/core';
import { DecodeError, KafkaBridge } from '@spillway/kafka';
import { postgresAdapter } from '@spillway/postgres';
import { Kafka, type KafkaMessage, logLevel } from 'kafkajs';
import pg from 'pg';
import { kafkaBrokers } from '../kafka-broker.js';
import { machineInfo } from '../machine.js';
import { summary } from '../numbers.js';

interface DockStatus {
  seq: number;
  dock: string;
  bikes: number;
  emptySlots: number;
}

const { values: flags } = parseArgs({
  options: {
    messages: { type: 'string', default: '200000' },
    repeats: { type: 'string', default: '3' },
    partitions: { type: 'string', default: '6' },
    batch: { type: 'string', default: '5000' },
    // kafkajs' maxBytesPerPartition for both consumers; 0 keeps kafkajs' default (1 MiB).
    'fetch-bytes': { type: 'string', default: '0' },
  },
});
const MESSAGES = Number(flags.messages);
const REPEATS = Number(flags.repeats);
const PARTITIONS = Number(flags.partitions);
const BATCH = Number(flags.batch);
const FETCH_BYTES = Number(flags['fetch-bytes']);
const PG_URL = process.env.SPILLWAY_PG_URL ?? 'postgres://postgres@127.0.0.1:5432/test';
// SPILLWAY_KAFKA_BROKERS, or a private broker started for this run.
const broker = await kafkaBrokers();
const BROKERS = broker.brokers;
const tag = randomBytes(4).toString('hex');
const TOPIC = `spillway_bench_bridge_${tag}`;
const SCHEMA = `spillway_bench_bridge_${tag}`;
const TABLE = 'dock_status';

const kafka = new Kafka({ clientId: `bench-${tag}`, brokers: BROKERS, logLevel: logLevel.NOTHING });
const consumerConfig = {
  sessionTimeout: 30_000,
  heartbeatInterval: 3000,
  maxWaitTimeInMs: 100,
  ...(FETCH_BYTES > 0 ? { maxBytesPerPartition: FETCH_BYTES } : {}),
};
const pool = new pg.Pool({ connectionString: PG_URL, max: 4, options: `-c search_path=${SCHEMA}` });
pool.on('error', () => undefined);

const event = (seq: number): DockStatus => ({
  seq,
  dock: `dock-${String(seq % 5000).padStart(4, '0')}`,
  bikes: seq % 13,
  emptySlots: 12 - (seq % 13),
});
const decode = (m: KafkaMessage): DockStatus | DecodeError => {
  try {
    return JSON.parse(m.value!.toString('utf8')) as DockStatus;
  } catch (error) {
    return new DecodeError('not JSON', { cause: error });
  }
};

function sink(): Sink<DockStatus> {
  // One batch in flight: with more, core's batch selection skips the keys already in flight and,
  // with six partitions in every batch, leaves mostly tiny batches (reported to the core owner).
  const options: SinkOptions<DockStatus> = {
    name: 'dock-status',
    maxRecords: BATCH,
    maxAgeMs: 500,
    concurrency: 1,
  };
  return new Sink(
    postgresAdapter<DockStatus>({
      pool,
      table: TABLE,
      columns: ['seq', 'dock', 'bikes', 'empty_slots'],
      map: (r) => [r.seq, r.dock, r.bikes, r.emptySlots],
      mode: 'copy',
    }),
    options,
  );
}

async function waitUntil(check: () => boolean): Promise<void> {
  while (!check()) await new Promise((r) => setTimeout(r, 2));
}

/** kafkajs alone: the source limit. */
async function runSource(): Promise<Run> {
  const consumer = kafka.consumer({
    groupId: `bench-source-${tag}-${randomBytes(3).toString('hex')}`,
    ...consumerConfig,
  });
  let seen = 0;
  let t0 = 0;
  let t1 = 0;
  await consumer.connect();
  await consumer.subscribe({ topics: [TOPIC], fromBeginning: true });
  let cpu0 = process.cpuUsage();
  await consumer.run({
    eachBatch: async ({ batch }) => {
      if (t0 === 0) {
        t0 = performance.now();
        cpu0 = process.cpuUsage();
      }
      seen += batch.messages.length;
      if (seen >= MESSAGES && t1 === 0) {
        t1 = performance.now();
        cpu = cpuMs(cpu0);
      }
    },
  });
  let cpu = 0;
  await waitUntil(() => t1 > 0);
  await consumer.disconnect();
  return { rate: MESSAGES / ((t1 - t0) / 1000), cpuUsPerMessage: (cpu * 1000) / MESSAGES };
}

/** Process CPU time (user + system) since `since`, ms. */
function cpuMs(since: NodeJS.CpuUsage): number {
  const u = process.cpuUsage(since);
  return (u.user + u.system) / 1000;
}

interface Run {
  rate: number;
  /** Process CPU per message, µs: where the time goes on a shared machine. */
  cpuUsPerMessage: number;
  pauses?: number;
}

/** The sink alone, from memory: the store limit. */
async function runStore(rows: DockStatus[]): Promise<Run> {
  const s = sink();
  const t0 = performance.now();
  const cpu0 = process.cpuUsage();
  for (const r of rows) if (!s.tryWrite(r)) await s.write(r);
  await s.flush();
  const t1 = performance.now();
  const cpu = cpuMs(cpu0);
  await s.close();
  return { rate: MESSAGES / ((t1 - t0) / 1000), cpuUsPerMessage: (cpu * 1000) / MESSAGES };
}

async function runBridge(): Promise<Run> {
  const s = sink();
  let t0 = 0;
  let cpu0 = process.cpuUsage();
  const bridge = new KafkaBridge<DockStatus>({
    kafka,
    groupId: `bench-bridge-${tag}-${randomBytes(3).toString('hex')}`,
    consumerConfig,
    topics: [TOPIC],
    fromBeginning: true,
    decode: (m) => {
      if (t0 === 0) {
        t0 = performance.now();
        cpu0 = process.cpuUsage();
      }
      return decode(m);
    },
    route: () => s,
    deadLetter: { write: async () => undefined },
  });
  // Counted from events: snapshot() summarises histograms and is too costly to poll.
  let written = 0;
  s.on('written', (e) => (written += e.records));
  await bridge.start();
  await waitUntil(() => written >= MESSAGES);
  const t1 = performance.now();
  const cpu = cpuMs(cpu0);
  const pauses = bridge.snapshot().pauses;
  await bridge.stop({ timeoutMs: 20_000 });
  await s.close();
  return { rate: MESSAGES / ((t1 - t0) / 1000), cpuUsPerMessage: (cpu * 1000) / MESSAGES, pauses };
}

async function main(): Promise<void> {
  const admin = kafka.admin();
  await admin.connect();
  const setup = new pg.Client({ connectionString: PG_URL });
  await setup.connect();
  const versionSql = "SELECT current_setting('server_version') AS v";
  const version = (await setup.query<{ v: string }>(versionSql)).rows[0]!.v;
  await setup.query(`CREATE SCHEMA ${SCHEMA}`);
  await setup.query(
    `CREATE TABLE ${SCHEMA}.${TABLE} (seq bigint NOT NULL, dock text NOT NULL, bikes int NOT NULL, empty_slots int NOT NULL)`,
  );
  try {
    await admin.createTopics({
      topics: [{ topic: TOPIC, numPartitions: PARTITIONS, replicationFactor: 1 }],
      waitForLeaders: true,
    });
    const producer = kafka.producer({ allowAutoTopicCreation: false });
    await producer.connect();
    const rows: DockStatus[] = [];
    for (let start = 0; start < MESSAGES; start += 10_000) {
      const messages = [];
      for (let seq = start; seq < Math.min(MESSAGES, start + 10_000); seq++) {
        const e = event(seq);
        rows.push(e);
        messages.push({ partition: seq % PARTITIONS, value: JSON.stringify(e) });
      }
      await producer.send({ topic: TOPIC, acks: -1, messages });
    }
    await producer.disconnect();
    console.log(
      JSON.stringify({
        benchmark: 'kafka-bridge',
        machine: machineInfo({ postgresql: version, kafka: broker.version }),
        messages: MESSAGES,
        repeats: REPEATS,
        partitions: PARTITIONS,
        batch: BATCH,
        fetchBytesPerPartition: FETCH_BYTES || 'kafkajs default',
        mode: 'copy',
      }),
    );

    const samples = {
      source: [] as number[],
      store: [] as number[],
      bridge: [] as number[],
      ratio: [] as number[],
    };
    const cpu = { source: [] as number[], store: [] as number[], bridge: [] as number[] };
    const order = ['source', 'store', 'bridge'] as const;
    for (let rep = 0; rep < REPEATS; rep++) {
      const round: Partial<Record<'source' | 'store' | 'bridge', Run>> = {};
      for (let k = 0; k < order.length; k++) {
        const which = order[(k + rep) % order.length]!;
        await setup.query(`TRUNCATE ${SCHEMA}.${TABLE}`);
        if (which === 'source') round.source = await runSource();
        else if (which === 'store') round.store = await runStore(rows);
        else {
          round.bridge = await runBridge();
          const n = Number(
            (await setup.query<{ n: string }>(`SELECT count(*) AS n FROM ${SCHEMA}.${TABLE}`)).rows[0]!.n,
          );
          if (n !== MESSAGES) throw new Error(`bridge run wrote ${n} rows, expected ${MESSAGES}`);
        }
      }
      const { source, store, bridge } = round as Record<'source' | 'store' | 'bridge', Run>;
      const ratio = bridge.rate / Math.min(source.rate, store.rate);
      samples.source.push(source.rate);
      samples.store.push(store.rate);
      samples.bridge.push(bridge.rate);
      samples.ratio.push(ratio);
      cpu.source.push(source.cpuUsPerMessage);
      cpu.store.push(store.cpuUsPerMessage);
      cpu.bridge.push(bridge.cpuUsPerMessage);
      console.log(
        `repeat ${rep + 1}: source ${Math.round(source.rate)} msg/s, store ${Math.round(store.rate)} rows/s, bridge ${Math.round(bridge.rate)} msg/s ` +
          `(${bridge.pauses} partition pauses), bridge / min = ${ratio.toFixed(2)}; CPU µs/message: source ${source.cpuUsPerMessage.toFixed(1)}, ` +
          `store ${store.cpuUsPerMessage.toFixed(1)}, bridge ${bridge.cpuUsPerMessage.toFixed(1)}`,
      );
    }
    const fmt = (x: number) => Math.round(x).toLocaleString('en-US');
    console.log(`\nmessages/s, median of ${REPEATS} (range; spread = (max-min)/median)`);
    for (const k of ['source', 'store', 'bridge'] as const) {
      const s = summary(samples[k]);
      console.log(
        `${k.padEnd(7)} ${fmt(s.median).padStart(9)}  (${fmt(s.min)}–${fmt(s.max)}, spread ${s.spreadPct.toFixed(0)}%)`,
      );
    }
    const r = summary(samples.ratio);
    const c = (k: 'source' | 'store' | 'bridge') => summary(cpu[k]).median.toFixed(1);
    console.log(
      `process CPU per message, median µs: source ${c('source')}, store ${c('store')}, bridge ${c('bridge')} (one Node thread does the source's and the store's work in the bridge)`,
    );
    console.log(
      `bridge / min(source, store): median ${r.median.toFixed(2)} (range ${r.min.toFixed(2)}–${r.max.toFixed(2)}); target ≥ 0.80`,
    );
    console.log(JSON.stringify({ samples, cpuUsPerMessage: cpu }));
  } finally {
    await admin.deleteTopics({ topics: [TOPIC] }).catch(() => undefined);
    await admin.disconnect();
    await setup.query(`DROP SCHEMA ${SCHEMA} CASCADE`).catch(() => undefined);
    await setup.end();
    await pool.end();
    await broker.stop();
  }
}

await main();
