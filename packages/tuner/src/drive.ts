import { FLUSH_REASONS, type FlushReason, type RecordMeta } from '@spillway/core';
import { Histogram } from '@spillway/core/kit';
import type { CellResult, Stuck } from './cell-result.js';
import type { CellSpec } from './cell-spec.js';
import { round, roundDist } from './numbers.js';
import { SeededRandom } from './random.js';
import { type DockStatus, dockStatus } from './records.js';
import { arrivals } from './shapes.js';
import type { Subject } from './subject.js';

const sleep = (ms: number) => new Promise<void>((resolve) => setTimeout(resolve, ms));

/** Drives the schedule into the subject in real time and measures what comes out. */
export async function drive(
  spec: CellSpec,
  subject: Subject,
  estimate: (r: DockStatus) => number,
): Promise<CellResult> {
  const shape = spec.shape;
  const rnd = new SeededRandom(shape.seed ^ 0x5eed);
  const latency = new Histogram(1000);
  const scheduledLatency = new Histogram(1000);
  const withStuck = new Histogram(1000);
  const writes = new Histogram(1000);
  const flushes = Object.fromEntries(FLUSH_REASONS.map((r) => [r, 0])) as Record<FlushReason, number>;

  // Accepted-but-not-durable records, by their meta object (the batcher hands the same objects back).
  const held = new Map<RecordMeta, number>();
  let heldArea = 0; // ∫ held(t) dt, ms·records
  let heldSince = 0;
  const touchHeld = (now: number) => {
    heldArea += held.size * (now - heldSince);
    heldSince = now;
  };

  let batches = 0;
  let batchRecords = 0;
  let acceptedRecords = 0;
  let acceptedBytes = 0;
  let flushedRecords = 0;
  let flushedBytes = 0;
  // The record being written right now: counted as buffered if a flush fires inside the write.
  let inWriteRecords = 0;
  let inWriteBytes = 0;
  let peakRecords = 0;
  let peakBytes = 0;
  let durable = 0;
  let latencySum = 0;
  let lastDurableAt = 0;
  let windowOpen = true;

  subject.onFlush((reason, records, bytes) => {
    const bufferedRecords = acceptedRecords + inWriteRecords - flushedRecords;
    const bufferedBytes = acceptedBytes + inWriteBytes - flushedBytes;
    if (bufferedRecords > peakRecords) peakRecords = bufferedRecords;
    if (bufferedBytes > peakBytes) peakBytes = bufferedBytes;
    flushedRecords += records;
    flushedBytes += bytes;
    if (!windowOpen) return;
    flushes[reason]++;
    batches++;
    batchRecords += records;
  });
  subject.onWritten((_records, ms) => {
    if (windowOpen) writes.record(ms);
  });
  const origin = performance.timeOrigin;
  subject.onSettled((metas, latencies, ok) => {
    const now = performance.now();
    touchHeld(now);
    for (let i = 0; i < metas.length; i++) {
      const meta = metas[i];
      if (meta) held.delete(meta);
      if (!windowOpen || !ok) continue;
      const ms = latencies[i] ?? 0;
      latency.record(ms);
      withStuck.record(ms);
      latencySum += ms;
      if (meta?.eventTime !== undefined) scheduledLatency.record(now - (meta.eventTime - origin));
    }
    if (windowOpen && ok) {
      durable += metas.length;
      lastDurableAt = now;
    }
  });

  const cpuStart = process.cpuUsage();
  const start = performance.now();
  heldSince = start;
  let scheduled = 0;
  let offered = 0;
  let sinceYield = 0;
  for (const a of arrivals(shape)) {
    scheduled++;
    let now = performance.now() - start;
    if (now >= shape.durationMs) break; // behind schedule at the end: the rest is not offered
    if (a.at > now + 0.5) {
      await sleep(a.at - now);
      sinceYield = 0;
      now = performance.now() - start;
    }
    const dueAt = start + a.at;
    const meta: RecordMeta = { partition: a.partition, eventTime: origin + dueAt };
    const record = dockStatus(rnd, offered, a.partition, Math.round(origin + dueAt));
    inWriteRecords = 1;
    inWriteBytes = estimate(record);
    if (!subject.tryWrite(record, meta)) {
      await subject.write(record, meta);
      sinceYield = 0;
    }
    const t = performance.now();
    touchHeld(t);
    held.set(meta, t);
    acceptedRecords++;
    acceptedBytes += inWriteBytes;
    inWriteRecords = 0;
    inWriteBytes = 0;
    offered++;
    // Behind schedule the loop would never yield: let timers and I/O in now and then.
    if (++sinceYield >= 256) {
      sinceYield = 0;
      await new Promise<void>((resolve) => setImmediate(resolve));
    }
  }
  const loadEnd = performance.now();

  // Let the last records land, up to the grace period; what is still held then is stuck.
  const graceEnd = Math.max(loadEnd, start + shape.durationMs) + spec.graceMs;
  while (held.size > 0 && performance.now() < graceEnd) await sleep(5);
  const cutoff = performance.now();
  touchHeld(cutoff);
  windowOpen = false;
  const cpu = process.cpuUsage(cpuStart);

  let ageSum = 0;
  let oldest = 0;
  for (const acceptedAt of held.values()) {
    const age = cutoff - acceptedAt;
    ageSum += age;
    if (age > oldest) oldest = age;
    withStuck.record(age);
  }
  const stuck: Stuck = {
    records: held.size,
    oldestAgeMs: round(oldest),
    meanAgeMs: held.size === 0 ? 0 : round(ageSum / held.size),
  };

  // Throughput per second of load: the tail's latency shows on the latency axis, not here. A
  // setting that cannot keep up holds the generator back (backpressure), so fewer records are
  // offered in the schedule's time and the figure drops to what the setting sustains.
  const loadMs = Math.max(shape.durationMs, loadEnd - start);
  const throughput = (durable / loadMs) * 1000;
  // Little's law over [start, windowEnd]: held records enter at accept and leave when durable.
  // After the last durable write nothing is held, so the area to the cutoff equals the area to windowEnd.
  const windowEnd = held.size === 0 ? lastDurableAt || cutoff : cutoff;
  const windowMs = Math.max(1, windowEnd - start);
  const meanHeld = heldArea / windowMs;
  const meanTimeHeldMs = durable === 0 ? 0 : latencySum / durable;
  const arrivalRate = durable / windowMs;
  const predicted = arrivalRate * meanTimeHeldMs;

  await subject.close();
  const flushDuration = writes.summary();

  return {
    id: spec.id,
    spec,
    scheduled,
    offered,
    realisedRate: round((offered / shape.durationMs) * 1000),
    durable,
    throughput: round(throughput),
    latencyMs: roundDist(latency.summary()),
    scheduledLatencyMs: roundDist(scheduledLatency.summary()),
    latencyWithStuckMs: {
      p99: round(Math.min(withStuck.percentile(99), withStuck.summary().max)),
      max: round(withStuck.summary().max),
    },
    stuck,
    batches,
    meanBatchRecords: batches === 0 ? 0 : round(batchRecords / batches),
    flushes,
    flushDurationMs: roundDist(flushDuration),
    peakBufferedRecords: peakRecords,
    peakBufferedBytes: peakBytes,
    peakRssMb: round(process.resourceUsage().maxRSS / 1024),
    cpuSeconds: round((cpu.user + cpu.system) / 1e6),
    little: {
      meanHeld: round(meanHeld),
      throughput: round(arrivalRate * 1000),
      meanTimeHeldMs: round(meanTimeHeldMs),
      // Only a window in which every record landed balances: a stuck record is held with no exit.
      ratio: predicted === 0 || stuck.records > 0 ? null : round(meanHeld / predicted, 4),
    },
    windowMs: round(windowMs),
  };
}
