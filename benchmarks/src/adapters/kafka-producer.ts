// Kafka producer sink throughput against the raw driver, in one process and one run:
// - raw:        kafkajs producer.sendBatch of the same messages, one call per batch (acks -1, idempotent);
// - sink:       Sink + kafkaProducerAdapter, flushing by size at the same batch size; one sink (and
//               producer) per batch size for the whole run, as a service keeps;
// - per-record: one awaited producer.send per record (the baseline batching must beat).
// Run: npx tsc --build && node benchmarks/dist/adapters/kafka-producer.js [--records 50000]
//      [--repeats 5] [--sizes 100,1000,10000] [--per-record 1000] [--partitions 4].
// Broker: SPILLWAY_KAFKA_BROKERS (comma-separated), else a private broker started through the test
// harness (startKafka). Nothing here asserts a time: it prints samples, medians, spreads, ratios.
// Client CPU per record (user + system of this process, over the same window as the rate) is
// printed for both sides, with the ratio sink/raw of each pair of runs (median and range): the
// broker runs on the same machine, so the rate also moves with its share of the cores.

import { randomBytes } from 'node:crypto';
import { parseArgs } from 'node:util';
import { Sink } from '@spillway/core';
import { kafkaProducerAdapter } from '@spillway/kafka';
import { machineInfo } from '@spillway/tuner';
import { Kafka, logLevel, type Message, Partitioners, type Producer } from 'kafkajs';
import { kafkaBrokers } from '../kafka-broker.js';
import { fmt, summary } from '../numbers.js';

interface DockEvent {
  dock: string;
  seq: number;
  bikes: number;
  district: string;
}

const { values: flags } = parseArgs({
  options: {
    records: { type: 'string', default: process.env.SPILLWAY_BENCH_RECORDS ?? '50000' },
    repeats: { type: 'string', default: process.env.SPILLWAY_BENCH_REPEATS ?? '5' },
    sizes: { type: 'string', default: '100,1000,10000' },
    'per-record': { type: 'string', default: '1000' },
    partitions: { type: 'string', default: '4' },
  },
});
const RECORDS = Number(flags.records);
const REPEATS = Number(flags.repeats);
const SIZES = String(flags.sizes).split(',').map(Number);
const PER_RECORD = Number(flags['per-record']);
const PARTITIONS = Number(flags.partitions);

const records: DockEvent[] = Array.from({ length: RECORDS }, (_, i) => ({
  dock: `dock-${i % 500}`,
  seq: i,
  bikes: i % 13,
  district: `d${i % 7}`,
}));
// The same record → message work on both sides, inside the timed section.
const toMessage = (e: DockEvent): Message => ({ key: e.dock, value: JSON.stringify(e) });
const producerConfig = {
  idempotent: true,
  allowAutoTopicCreation: false,
  retry: { retries: 5 },
  createPartitioner: Partitioners.DefaultPartitioner,
};

/** Records per second, and client CPU µs per record (user + system of this process), over one pass. */
interface Pass {
  rate: number;
  cpu: number;
}

function passSince(t0: number, cpu0: NodeJS.CpuUsage): Pass {
  const rate = records.length / ((performance.now() - t0) / 1000);
  const cpu = process.cpuUsage(cpu0);
  return { rate, cpu: (cpu.user + cpu.system) / records.length };
}

async function raw(producer: Producer, topic: string, batch: number): Promise<Pass> {
  const cpu0 = process.cpuUsage();
  const t0 = performance.now();
  for (let i = 0; i < records.length; i += batch) {
    await producer.sendBatch({
      topicMessages: [{ topic, messages: records.slice(i, i + batch).map(toMessage) }],
      acks: -1,
      timeout: 30_000,
    });
  }
  return passSince(t0, cpu0);
}

// One sink, and so one adapter and kafkajs producer, per batch size for the whole run, made and
// connected before its first timed pass: a service keeps its sink for as long as it runs, as the
// raw side keeps its producer. (With a new sink and producer per pass, each window also held what a
// new instance costs at first, which the raw side, on its one producer, never paid: client CPU
// sink ÷ raw at batch 1,000 measured 1.13 that way and 0.97 this way, 5 quiet runs each.)
const sinks = new Map<number, Sink<DockEvent>>();

async function sinkFor(kafka: Kafka, topic: string, batch: number): Promise<Sink<DockEvent>> {
  let sink = sinks.get(batch);
  if (sink !== undefined) return sink;
  const adapter = kafkaProducerAdapter<DockEvent>({
    kafka,
    topic,
    mapper: (e) => ({ key: e.dock, value: JSON.stringify(e) }),
    producer: { createPartitioner: Partitioners.DefaultPartitioner },
  });
  sink = new Sink(adapter, { maxRecords: batch, maxBytes: 1 << 30, maxAgeMs: 60_000, idleMs: 0 });
  // Connect outside the timed part, as the raw producer is: one record, flushed.
  await sink.write(records[0]!);
  await sink.flush();
  sinks.set(batch, sink);
  return sink;
}

async function viaSink(kafka: Kafka, topic: string, batch: number): Promise<Pass> {
  const sink = await sinkFor(kafka, topic, batch);
  const written0 = sink.snapshot().written;
  const cpu0 = process.cpuUsage();
  const t0 = performance.now();
  for (const r of records) if (!sink.tryWrite(r)) await sink.write(r);
  await sink.flush();
  // Measured up to the last record durable, like the raw side; the check below is not.
  const pass = passSince(t0, cpu0);
  const written = sink.snapshot().written - written0;
  if (written !== records.length) throw new Error(`sink wrote ${written} of ${records.length}`);
  return pass;
}

async function perRecord(producer: Producer, topic: string): Promise<number> {
  const t0 = performance.now();
  for (const r of records.slice(0, PER_RECORD))
    await producer.send({ topic, messages: [toMessage(r)], acks: -1, timeout: 30_000 });
  return PER_RECORD / ((performance.now() - t0) / 1000);
}

async function main(): Promise<void> {
  const broker = kafkaBrokers();
  const kafka = new Kafka({
    clientId: 'spillway-bench',
    brokers: broker.brokers,
    logLevel: logLevel.NOTHING,
  });
  const admin = kafka.admin();
  await admin.connect();
  const topic = `spw_bench_${randomBytes(4).toString('hex')}`;
  await admin.createTopics({
    topics: [{ topic, numPartitions: PARTITIONS, replicationFactor: 1 }],
    waitForLeaders: true,
  });
  const producer = kafka.producer(producerConfig);
  await producer.connect();
  try {
    console.log(
      JSON.stringify({
        benchmark: 'kafka-producer-adapter',
        machine: machineInfo({ kafka: broker.version }),
        records: RECORDS,
        repeats: REPEATS,
        sizes: SIZES,
        perRecord: PER_RECORD,
        partitions: PARTITIONS,
      }),
    );
    // Warm-up, not measured: every batch size once on each side (each size has its own sink).
    for (const size of SIZES) {
      await raw(producer, topic, size);
      await viaSink(kafka, topic, size);
    }
    const samples = new Map<string, number[]>();
    const push = (k: string, v: number) => (samples.get(k) ?? samples.set(k, []).get(k)!).push(v);
    for (let rep = 0; rep < REPEATS; rep++) {
      push('per-record', await perRecord(producer, topic));
      for (const size of SIZES) {
        // Alternate which side goes first, so that drift on a shared machine favours neither.
        const order = rep % 2 === 0 ? (['raw', 'sink'] as const) : (['sink', 'raw'] as const);
        for (const side of order) {
          const pass = side === 'raw' ? await raw(producer, topic, size) : await viaSink(kafka, topic, size);
          push(`${side}@${size}`, pass.rate);
          push(`cpu:${side}@${size}`, pass.cpu);
        }
      }
    }
    const one = summary(samples.get('per-record')!);
    console.log(`\nrecords/s (median of ${REPEATS}; ± = half of (max-min)/median)`);
    console.log(`per-record send: ${fmt(one.median)} (${fmt(one.min)}–${fmt(one.max)})`);
    console.log(
      'batch  | raw sendBatch          | sink                   | sink/raw: ratio of medians, paired median [range] | sink/per-record | client CPU µs/record raw → sink | CPU sink/raw [pairs]',
    );
    for (const size of SIZES) {
      const r = summary(samples.get(`raw@${size}`)!);
      const s = summary(samples.get(`sink@${size}`)!);
      const pairs = summary(samples.get(`sink@${size}`)!.map((v, i) => v / samples.get(`raw@${size}`)![i]!));
      const cpuRaw = samples.get(`cpu:raw@${size}`)!;
      const cpuSink = samples.get(`cpu:sink@${size}`)!;
      const cpuPairs = summary(cpuSink.map((v, i) => v / cpuRaw[i]!));
      console.log(
        `${String(size).padEnd(6)} | ${fmt(r.median).padStart(9)} (±${(r.spreadPct / 2).toFixed(0)}%)`.padEnd(
          33,
        ) +
          ` | ${fmt(s.median).padStart(9)} (±${(s.spreadPct / 2).toFixed(0)}%)`.padEnd(25) +
          ` | ${(s.median / r.median).toFixed(2)}, paired ${pairs.median.toFixed(2)} [${pairs.min.toFixed(2)}–${pairs.max.toFixed(2)}]`.padEnd(
            40,
          ) +
          ` | ${`${(s.median / one.median).toFixed(1)}×`.padEnd(15)}` +
          ` | ${`${summary(cpuRaw).median.toFixed(2)} → ${summary(cpuSink).median.toFixed(2)}`.padEnd(31)}` +
          ` | ${cpuPairs.median.toFixed(2)} [${cpuPairs.min.toFixed(2)}–${cpuPairs.max.toFixed(2)}]`,
      );
    }
    console.log(JSON.stringify({ samples: Object.fromEntries(samples) }));
  } finally {
    for (const sink of sinks.values()) await sink.close();
    await producer.disconnect();
    await admin.deleteTopics({ topics: [topic] }).catch(() => undefined);
    await admin.disconnect();
  }
}

main().catch((error) => {
  console.error(error);
  process.exitCode = 1;
});
