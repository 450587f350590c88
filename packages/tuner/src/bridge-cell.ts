import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { FLUSH_REASONS, type FlushReason, fileDeadLetter, Sink } from '@spillway/core';
import { Histogram } from '@spillway/core/kit';
import { KafkaBridge } from '@spillway/kafka';
import { Kafka, logLevel, type Message } from 'kafkajs';
import type { CellResult } from './cell-result.js';
import type { CellSpec } from './cell-spec.js';
import { round, roundDist } from './numbers.js';
import { SeededRandom } from './random.js';
import { type DockStatus, dockStatus } from './records.js';
import { arrivals } from './shapes.js';
import { openPostgres } from './store-postgres.js';

const PARTITIONS = 4;
const sleep = (ms: number) => new Promise<void>((resolve) => setTimeout(resolve, ms));

/**
 * A Kafka → PostgreSQL cell: the generator produces the schedule to a topic (producer
 * timestamps = scheduled times), a KafkaBridge consumes it into a Spillway sink on PostgreSQL.
 * Latency is accept (the bridge handed the record to the sink) → durable; the scheduled column
 * is produce-scheduled → durable, end to end through the broker (ms resolution: Kafka timestamps).
 */
export async function runBridgeCell(spec: CellSpec): Promise<CellResult> {
  const brokers = spec.store.brokers;
  if (!brokers || brokers.length === 0)
    throw new TypeError('Expected `brokers` of the bridge store to be a non-empty list of host:port');
  if (spec.variant === 'size-only')
    throw new TypeError('the bridge cells drive the Spillway sink only (size-only has no bridge)');
  const pgStore = await openPostgres(
    { kind: 'postgres', mode: spec.store.mode ?? 'copy', ...(spec.store.url ? { url: spec.store.url } : {}) },
    spec.id,
  );
  const kafka = new Kafka({ clientId: `spillway-bench-${process.pid}`, brokers, logLevel: logLevel.NOTHING });
  const admin = kafka.admin();
  const producer = kafka.producer({ allowAutoTopicCreation: false });
  const topic = `spillway-bench-${spec.id}`.replace(/[^a-zA-Z0-9._-]/g, '_').slice(0, 200);
  const dlqDir = mkdtempSync(join(tmpdir(), 'spillway-bench-dlq-'));
  let bridge: KafkaBridge<DockStatus> | undefined;
  try {
    await admin.connect();
    await admin.createTopics({
      topics: [{ topic, numPartitions: PARTITIONS, replicationFactor: 1 }],
      waitForLeaders: true,
    });
    await producer.connect();
    const s = spec.settings;
    const sink = new Sink(pgStore.adapter, {
      name: 'bench',
      maxRecords: spec.variant === 'per-record' ? 1 : s.maxRecords,
      maxAgeMs: s.maxAgeMs,
      idleMs: s.idleMs,
      concurrency: s.concurrency,
    });
    bridge = new KafkaBridge<DockStatus>({
      kafka,
      groupId: `${topic}-group`,
      consumerConfig: { maxWaitTimeInMs: 50 },
      topics: [topic],
      fromBeginning: true,
      decode: (m) => JSON.parse(m.value?.toString('utf8') ?? 'null') as DockStatus,
      route: () => sink,
      deadLetter: fileDeadLetter(join(dlqDir, 'undecodable.ndjson')),
    });

    const latency = new Histogram(1000);
    const scheduled = new Histogram(1000);
    const writes = new Histogram(1000);
    const flushes = Object.fromEntries(FLUSH_REASONS.map((r) => [r, 0])) as Record<FlushReason, number>;
    let windowOpen = false;
    let warmed = false;
    let durable = 0;
    let batches = 0;
    let batchRecords = 0;
    let peakRecords = 0;
    let peakBytes = 0;
    sink.on('settled', (e) => {
      if (!windowOpen) {
        warmed = true;
        return;
      }
      const now = performance.timeOrigin + performance.now();
      if (e.outcome !== 'durable') return;
      durable += e.metas.length;
      for (let i = 0; i < e.metas.length; i++) {
        latency.record(e.latenciesMs[i] ?? 0);
        const t = e.metas[i]?.eventTime;
        if (t !== undefined) scheduled.record(now - t);
      }
    });
    sink.on('flush', (e) => {
      const left = sink.pending().buffered;
      peakRecords = Math.max(peakRecords, e.records + left);
      // Bytes still buffered are estimated from this batch's mean record size.
      peakBytes = Math.max(peakBytes, Math.round(e.bytes + (left * e.bytes) / Math.max(1, e.records)));
      if (!windowOpen) return;
      flushes[e.reason]++;
      batches++;
      batchRecords += e.records;
    });
    sink.on('written', (e) => {
      if (windowOpen) writes.record(e.durationMs);
    });

    await bridge.start();
    // Wait until the group has its partitions and the first message lands: the join is not measured.
    const rnd = new SeededRandom(spec.shape.seed ^ 0x5eed);
    await producer.send({
      topic,
      messages: [{ partition: 0, value: JSON.stringify(dockStatus(rnd, -1, 0, Date.now())) }],
    });
    const warmDeadline = Date.now() + 60_000;
    while (!warmed && Date.now() < warmDeadline) await sleep(20);
    if (!warmed) throw new TypeError('the bridge did not deliver a warm-up message within 60 s');

    windowOpen = true;
    const cpuStart = process.cpuUsage();
    const shape = spec.shape;
    const origin = performance.timeOrigin;
    const start = performance.now();
    const sends: Promise<unknown>[] = [];
    let pending: Message[] = [];
    let offered = 0;
    let scheduledCount = 0;
    const sendPending = () => {
      if (pending.length === 0) return;
      sends.push(producer.send({ topic, messages: pending }));
      pending = [];
    };
    for (const a of arrivals(shape)) {
      scheduledCount++;
      const now = performance.now() - start;
      if (now >= shape.durationMs) break;
      if (a.at > now + 0.5) {
        // Everything due so far goes out in one produce request; then wait for the next arrival.
        sendPending();
        await sleep(a.at - now);
      }
      const due = origin + start + a.at;
      pending.push({
        partition: a.partition % PARTITIONS,
        value: JSON.stringify(dockStatus(rnd, offered, a.partition, Math.round(due))),
        timestamp: String(Math.round(due)),
      });
      offered++;
    }
    sendPending();
    await Promise.all(sends);
    const loadEnd = performance.now();
    const graceEnd = Math.max(loadEnd, start + shape.durationMs) + spec.graceMs + 1000; // + a fetch round
    while (durable < offered && performance.now() < graceEnd) await sleep(5);
    const cutoff = performance.now();
    windowOpen = false;
    const cpu = process.cpuUsage(cpuStart);
    const oldest = sink.snapshot().oldestAgeMs;

    const loadMs = Math.max(shape.durationMs, loadEnd - start);
    const result: CellResult = {
      id: spec.id,
      spec,
      scheduled: scheduledCount,
      offered,
      realisedRate: round((offered / shape.durationMs) * 1000),
      durable,
      throughput: round((durable / loadMs) * 1000),
      latencyMs: roundDist(latency.summary()),
      scheduledLatencyMs: roundDist(scheduled.summary()),
      latencyWithStuckMs: { p99: roundDist(latency.summary()).p99, max: round(latency.summary().max) },
      // Records not durable at the cutoff may still be in the broker or the consumer: their age
      // is known only for those already in the sink's buffer.
      stuck: { records: offered - durable, oldestAgeMs: round(oldest), meanAgeMs: 0 },
      batches,
      meanBatchRecords: batches === 0 ? 0 : round(batchRecords / batches),
      flushes,
      flushDurationMs: roundDist(writes.summary()),
      peakBufferedRecords: peakRecords,
      peakBufferedBytes: peakBytes,
      peakRssMb: round(process.resourceUsage().maxRSS / 1024),
      cpuSeconds: round((cpu.user + cpu.system) / 1e6),
      // Not measured here: the bridge owns the accept calls, so the harness has no clock reads of its own.
      little: { meanHeld: 0, throughput: 0, meanTimeHeldMs: 0, ratio: null },
      windowMs: round(cutoff - start),
    };
    if (pgStore.version) result.storeVersion = pgStore.version;
    return result;
  } finally {
    await bridge?.stop({ timeoutMs: 20_000 }).catch(() => undefined);
    await producer.disconnect().catch(() => undefined);
    await admin.deleteTopics({ topics: [topic], timeout: 10_000 }).catch(() => undefined);
    await admin.disconnect().catch(() => undefined);
    await pgStore.dispose();
    rmSync(dlqDir, { recursive: true, force: true });
  }
}
