// What exactly-once into Kafka costs: the transactional sink against the plain producer sink, in
// one process and one run, on the same records with the same source metadata:
// - plain:         Sink + kafkaProducerAdapter (idempotent, acks -1), at-least-once;
// - transactional: Sink + kafkaTransactionalAdapter, one transaction per source partition and
//                  batch, with the next source offset stored in the transaction (a fresh group
//                  each run, so nothing is found stored and every record is written).
// Records come from `--sources` source partitions of a real (empty) topic, as a KafkaBridge would
// hand them over, and go to an output topic of `--partitions` partitions. Each run times the
// writes and the final flush: wall time and this process's CPU time (process.cpuUsage), the two
// variants alternating which goes first. The producers connect outside the timed part.
// Run: npx tsc --build && SPILLWAY_KAFKA_BROKERS=127.0.0.1:9092 \
//        node benchmarks/dist/adapters/kafka-transactional.js [--records 100000] [--repeats 5]
//        [--batch 2000] [--sources 3] [--partitions 3]
// Nothing here asserts a time: it prints samples, medians, ranges and ratios.

import { randomBytes } from 'node:crypto';
import { parseArgs } from 'node:util';
import { type RecordMeta, Sink, type SinkAdapter } from '@spillway/core';
import { kafkaProducerAdapter, kafkaTransactionalAdapter } from '@spillway/kafka';
import { machineInfo } from '@spillway/tuner';
import { Kafka, logLevel, Partitioners } from 'kafkajs';
import { kafkaBrokers } from '../kafka-broker.js';
import { fmt, summary } from '../numbers.js';

interface DockEvent {
  dock: string;
  seq: number;
  bikes: number;
}

const { values: flags } = parseArgs({
  options: {
    records: { type: 'string', default: '100000' },
    repeats: { type: 'string', default: '5' },
    batch: { type: 'string', default: '2000' },
    sources: { type: 'string', default: '3' },
    partitions: { type: 'string', default: '3' },
  },
});
const RECORDS = Number(flags.records);
const REPEATS = Number(flags.repeats);
const BATCH = Number(flags.batch);
const SOURCES = Number(flags.sources);
const PARTITIONS = Number(flags.partitions);
for (const [name, v] of Object.entries({ RECORDS, REPEATS, BATCH, SOURCES, PARTITIONS }))
  if (!Number.isInteger(v) || v < 1)
    throw new TypeError(`--${name.toLowerCase()} must be a whole number ≥ 1`);

const records: DockEvent[] = Array.from({ length: RECORDS }, (_, i) => ({
  dock: `dock-${i % 500}`,
  seq: i,
  bikes: i % 13,
}));
const mapper = (e: DockEvent) => ({ key: e.dock, value: JSON.stringify(e) });

interface Run {
  wallMs: number;
  cpuMs: number;
}

/** Writes every record with its source metadata, flushes, and checks that all were written. */
async function timed(adapter: SinkAdapter<DockEvent>, sourceTopic: string): Promise<Run> {
  const sink = new Sink(adapter, { maxRecords: BATCH, maxBytes: 1 << 30, maxAgeMs: 60_000, idleMs: 0 });
  // Connects (and for the transactional sink fences and reads the stored offsets) outside the
  // timed part: one record per source partition, at offsets past the measured ones.
  for (let p = 0; p < SOURCES; p++)
    await sink.write(records[p]!, { topic: sourceTopic, partition: p, offset: String(RECORDS + p) });
  await sink.flush();
  const metas: RecordMeta[] = records.map((_, i) => ({
    topic: sourceTopic,
    partition: i % SOURCES,
    offset: String(RECORDS + SOURCES + Math.floor(i / SOURCES)),
  }));
  const cpu0 = process.cpuUsage();
  const t0 = performance.now();
  for (let i = 0; i < records.length; i++)
    if (!sink.tryWrite(records[i]!, metas[i])) await sink.write(records[i]!, metas[i]);
  await sink.flush();
  const wallMs = performance.now() - t0;
  const cpu = process.cpuUsage(cpu0);
  await sink.close();
  const written = sink.snapshot().written;
  if (written !== records.length + SOURCES)
    throw new Error(`the sink wrote ${written} of ${records.length + SOURCES} records`);
  return { wallMs, cpuMs: (cpu.user + cpu.system) / 1000 };
}

async function main(): Promise<void> {
  const broker = kafkaBrokers();
  const kafka = new Kafka({
    clientId: 'spillway-bench-txn',
    brokers: broker.brokers,
    logLevel: logLevel.NOTHING,
  });
  const admin = kafka.admin();
  await admin.connect();
  const tag = randomBytes(4).toString('hex');
  const source = `spw_bench_txn_src_${tag}`;
  const output = `spw_bench_txn_out_${tag}`;
  await admin.createTopics({
    topics: [
      { topic: source, numPartitions: SOURCES, replicationFactor: 1 },
      { topic: output, numPartitions: PARTITIONS, replicationFactor: 1 },
    ],
    waitForLeaders: true,
  });
  const plain = () =>
    kafkaProducerAdapter<DockEvent>({
      kafka,
      topic: output,
      mapper,
      producer: { createPartitioner: Partitioners.DefaultPartitioner },
    });
  let runNo = 0;
  const transactional = () =>
    kafkaTransactionalAdapter<DockEvent>({
      kafka,
      group: `spw-bench-txn-${tag}-${runNo++}`,
      transactionalIdPrefix: `spw-bench-${tag}-${runNo}`,
      topic: output,
      mapper,
    });
  const groups: string[] = [];
  try {
    console.log(
      JSON.stringify({
        benchmark: 'kafka-transactional-adapter',
        machine: machineInfo({ kafka: broker.version }),
        records: RECORDS,
        repeats: REPEATS,
        batch: BATCH,
        sources: SOURCES,
        partitions: PARTITIONS,
      }),
    );
    // One round of each, not measured: class loading, metadata, the broker's transaction log.
    await timed(plain(), source);
    groups.push(`spillway-spw-bench-txn-${tag}-${runNo}`);
    await timed(transactional(), source);
    const samples = { plain: [] as Run[], transactional: [] as Run[] };
    for (let rep = 0; rep < REPEATS; rep++) {
      const order =
        rep % 2 === 0 ? (['plain', 'transactional'] as const) : (['transactional', 'plain'] as const);
      for (const v of order) {
        if (v === 'transactional') groups.push(`spillway-spw-bench-txn-${tag}-${runNo}`);
        samples[v].push(await timed(v === 'plain' ? plain() : transactional(), source));
      }
    }
    const line = (name: string, runs: Run[]) => {
      const w = summary(runs.map((r) => RECORDS / (r.wallMs / 1000)));
      const c = summary(runs.map((r) => (r.cpuMs * 1000) / RECORDS));
      return `${name.padEnd(14)} | ${fmt(w.median).padStart(9)} (${fmt(w.min)}–${fmt(w.max)}) | ${c.median.toFixed(2)} (${c.min.toFixed(2)}–${c.max.toFixed(2)})`;
    };
    console.log(
      `\n${fmt(RECORDS)} records, batch ${BATCH}, ${SOURCES} source → ${PARTITIONS} output partitions, ${REPEATS} runs each (median (min–max))`,
    );
    console.log('sink           | records/s                      | process CPU µs/record');
    console.log(line('plain', samples.plain));
    console.log(line('transactional', samples.transactional));
    const wall = summary(samples.transactional.map((t, i) => t.wallMs / samples.plain[i]!.wallMs));
    const cpu = summary(samples.transactional.map((t, i) => t.cpuMs / samples.plain[i]!.cpuMs));
    console.log(
      `transactional ÷ plain, per pair: wall time ${wall.median.toFixed(2)} (${wall.min.toFixed(2)}–${wall.max.toFixed(2)}), process CPU ${cpu.median.toFixed(2)} (${cpu.min.toFixed(2)}–${cpu.max.toFixed(2)})`,
    );
    console.log(JSON.stringify({ samples }));
  } finally {
    await admin.deleteTopics({ topics: [source, output] }).catch(() => undefined);
    await admin.deleteGroups(groups).catch(() => undefined);
    await admin.disconnect();
  }
}

main().catch((error) => {
  console.error(error);
  process.exitCode = 1;
});
