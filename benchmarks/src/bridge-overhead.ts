/**
 * The consumer bridge's own CPU per message, without a broker or a store: kafkajs-shaped batches
 * (offset and timestamp strings, value Buffers, 6 partitions, batches of --fetch messages) are
 * handed to the bridge's `eachBatch` handler by a stand-in consumer, and routed to one Sink over a
 * no-op adapter. The baseline, measured in the same rounds, is the same Sink fed the same records
 * with `tryWriteMany()` and no metas: the difference is what the bridge adds per message (intake,
 * routing, metas, hand-off, settlements, progress), which the Kafka → PostgreSQL benchmark cannot
 * separate from kafkajs, the decoder, the store and a shared machine's noise. The decoder returns
 * one shared record, so no decoding is counted on either side.
 * Every sample is a fresh process; the two variants alternate. Nothing here asserts a time.
 *
 *   node benchmarks/dist/bridge-overhead.js [--messages 1000000] [--fetch 2000] [--batch 5000] [--repeats 7]
 */
import { execFileSync } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { parseArgs } from 'node:util';
import { Sink, type SinkAdapter } from '@spillway/core';
import { KafkaBridge } from '@spillway/kafka';
import type { Consumer, EachBatchPayload, KafkaMessage } from 'kafkajs';
import { summary } from './numbers.js';

const { values: flags } = parseArgs({
  options: {
    messages: { type: 'string', default: '1000000' },
    fetch: { type: 'string', default: '2000' },
    batch: { type: 'string', default: '5000' },
    repeats: { type: 'string', default: '7' },
    variant: { type: 'string' },
  },
});
const MESSAGES = Number(flags.messages);
const FETCH = Number(flags.fetch);
const BATCH = Number(flags.batch);
const REPEATS = Number(flags.repeats);
const PARTITIONS = 6;
const TOPIC = 'tandem.dock-status';

interface DockStatus {
  dock: string;
  bikes: number;
}
const RECORD: DockStatus = { dock: 'dock-0042', bikes: 7 };
const noop: SinkAdapter<DockStatus> = { kind: 'noop', write: async () => {}, classify: () => 'fatal' };

function newSink(): Sink<DockStatus> {
  return new Sink(noop, { name: 'dock-status', maxRecords: BATCH, maxAgeMs: 500, concurrency: 1 });
}

/** Batches as kafkajs hands them out: per partition, offsets counting up, one timestamp per produce. */
function fetched(): Array<{ partition: number; messages: KafkaMessage[] }> {
  const value = Buffer.from(JSON.stringify(RECORD));
  const next = new Array<number>(PARTITIONS).fill(0);
  const batches: Array<{ partition: number; messages: KafkaMessage[] }> = [];
  const timestamp = String(Date.now());
  for (let sent = 0; sent < MESSAGES; ) {
    const partition = batches.length % PARTITIONS;
    const n = Math.min(FETCH, MESSAGES - sent);
    const messages: KafkaMessage[] = [];
    for (let i = 0; i < n; i++) {
      const offset = next[partition]!++;
      messages.push({
        offset: String(offset),
        key: null,
        value: value.subarray(0),
        timestamp,
        attributes: 0,
        headers: {},
      } as unknown as KafkaMessage);
    }
    batches.push({ partition, messages });
    sent += n;
  }
  return batches;
}

/** The part of a kafkajs consumer the bridge uses; it never commits anywhere. */
class StandInConsumer {
  readonly events = {
    GROUP_JOIN: 'consumer.group_join',
    REBALANCING: 'consumer.rebalancing',
    CRASH: 'consumer.crash',
  };
  private readonly listeners = new Map<string, Array<(e: { payload: unknown }) => void>>();
  eachBatch: ((p: EachBatchPayload) => Promise<void>) | undefined;

  on(event: string, listener: (e: { payload: unknown }) => void) {
    this.listeners.set(event, [...(this.listeners.get(event) ?? []), listener]);
    return () => undefined;
  }
  join() {
    const payload = {
      memberId: 'bench',
      memberAssignment: { [TOPIC]: Array.from({ length: PARTITIONS }, (_, p) => p) },
    };
    for (const l of this.listeners.get(this.events.GROUP_JOIN) ?? []) l({ payload });
  }
  async connect() {}
  async subscribe() {}
  async run(config: { eachBatch: (p: EachBatchPayload) => Promise<void> }) {
    this.eachBatch = config.eachBatch;
  }
  pause() {}
  resume() {}
  paused() {
    return [];
  }
  async commitOffsets() {}
  async disconnect() {}

  deliver(partition: number, messages: KafkaMessage[]): Promise<void> {
    return this.eachBatch!({
      batch: {
        topic: TOPIC,
        partition,
        highWatermark: messages[messages.length - 1]!.offset,
        messages,
      } as never,
      resolveOffset: () => undefined,
      heartbeat: async () => undefined,
      isRunning: () => true,
      isStale: () => false,
    } as unknown as EachBatchPayload);
  }
}

function cpuNow(): number {
  const u = process.cpuUsage();
  return u.user + u.system;
}

/** CPU µs per message of one variant, in this process. */
async function child(variant: string): Promise<number> {
  const batches = fetched();
  const sink = newSink();
  let written = 0;
  let end = () => {};
  const done = new Promise<void>((resolve) => {
    end = resolve;
  });
  sink.on('written', (e) => {
    written += e.records;
    if (written >= MESSAGES) end();
  });
  let cpu0: number;
  if (variant === 'sink') {
    const records = new Array<DockStatus>(FETCH).fill(RECORD);
    cpu0 = cpuNow();
    for (const b of batches) {
      let at = 0;
      const n = b.messages.length;
      const slice = n === FETCH ? records : records.slice(0, n);
      while (at < n) {
        at += sink.tryWriteMany(at === 0 ? slice : slice.slice(at));
        if (at < n) await new Promise((r) => setImmediate(r));
      }
    }
  } else {
    const consumer = new StandInConsumer();
    const bridge = new KafkaBridge<DockStatus>({
      consumer: consumer as unknown as Consumer,
      topics: [TOPIC],
      decode: () => RECORD,
      route: () => sink,
      deadLetter: { write: async () => undefined },
    });
    await bridge.start();
    consumer.join();
    await new Promise((r) => setImmediate(r));
    cpu0 = cpuNow();
    for (const b of batches) await consumer.deliver(b.partition, b.messages);
    await done;
    const us = (cpuNow() - cpu0) / MESSAGES;
    await bridge.stop({ timeoutMs: 10_000 });
    await sink.close();
    return us;
  }
  await done;
  const us = (cpuNow() - cpu0) / MESSAGES;
  await sink.close();
  return us;
}

async function main(): Promise<void> {
  if (flags.variant !== undefined) {
    console.log(JSON.stringify({ us: await child(flags.variant) }));
    return;
  }
  const self = fileURLToPath(import.meta.url);
  const samples: Record<'sink' | 'bridge', number[]> = { sink: [], bridge: [] };
  const added: number[] = [];
  console.log(
    JSON.stringify({
      benchmark: 'bridge-overhead',
      messages: MESSAGES,
      fetch: FETCH,
      batch: BATCH,
      repeats: REPEATS,
    }),
  );
  for (let rep = 0; rep < REPEATS; rep++) {
    const order = rep % 2 === 0 ? (['sink', 'bridge'] as const) : (['bridge', 'sink'] as const);
    const round: Partial<Record<'sink' | 'bridge', number>> = {};
    for (const variant of order) {
      const out = execFileSync(process.execPath, [self, '--variant', variant, ...process.argv.slice(2)], {
        encoding: 'utf8',
      });
      round[variant] = (JSON.parse(out.trim().split('\n').pop()!) as { us: number }).us;
      samples[variant].push(round[variant]);
    }
    added.push(round.bridge! - round.sink!);
    console.log(
      `round ${rep + 1}: sink ${round.sink!.toFixed(3)} µs/msg, bridge ${round.bridge!.toFixed(3)} µs/msg, bridge − sink ${(round.bridge! - round.sink!).toFixed(3)}`,
    );
  }
  const cell = (xs: number[]) => {
    const s = summary(xs);
    return `${s.median.toFixed(3)} (${s.min.toFixed(3)}–${s.max.toFixed(3)})`;
  };
  console.log(`\nCPU µs per message, median (range) of ${REPEATS} rounds, each sample a fresh process`);
  console.log(`sink alone (tryWriteMany, no metas)  ${cell(samples.sink)}`);
  console.log(`through the bridge                   ${cell(samples.bridge)}`);
  console.log(`what the bridge adds, per round      ${cell(added)}`);
  console.log(JSON.stringify({ samples, added }));
}

await main();
