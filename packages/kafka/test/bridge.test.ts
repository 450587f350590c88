// Unit tests of the bridge's own logic (progress across sinks, holding and pausing, redelivery,
// commit fencing, rebalance and shutdown order) with a fake kafkajs consumer that the test drives
// by hand. The real-broker behaviour is covered in test/integration/bridge*.test.ts.
import { type Batch, type DeadLetter, Sink, type SinkAdapter } from '@spillway/core';
import {
  DecodeError,
  KafkaBridge,
  type KafkaBridgeOptions,
  type OffsetStore,
  type UndecodableMessage,
} from '@spillway/kafka';
import type { Consumer, EachBatchPayload, KafkaMessage } from 'kafkajs';
import { describe, expect, it } from 'vitest';

const TOPIC = 'tandem.dock-status';

type Listener = (e: { payload: unknown }) => void;

/** Just enough of a kafkajs Consumer for the bridge; records what the bridge asked of it. */
class FakeConsumer {
  readonly events = {
    GROUP_JOIN: 'consumer.group_join',
    REBALANCING: 'consumer.rebalancing',
    CRASH: 'consumer.crash',
  };
  readonly listeners = new Map<string, Set<Listener>>();
  readonly commits: Array<Array<{ topic: string; partition: number; offset: string }>> = [];
  readonly calls: string[] = [];
  readonly pausedSet = new Set<string>();
  eachBatch: ((p: EachBatchPayload) => Promise<void>) | undefined;
  resolved = new Map<number, string>();
  commitError: unknown;

  on(event: string, listener: Listener) {
    let set = this.listeners.get(event);
    if (!set) {
      set = new Set();
      this.listeners.set(event, set);
    }
    set.add(listener);
    return () => set!.delete(listener);
  }
  emit(event: string, payload: unknown) {
    for (const l of this.listeners.get(event) ?? []) l({ payload });
  }
  join(partitions: number[], memberId = 'member-1') {
    this.emit(this.events.GROUP_JOIN, { memberId, memberAssignment: { [TOPIC]: partitions } });
  }
  async connect() {
    this.calls.push('connect');
  }
  async subscribe() {
    this.calls.push('subscribe');
  }
  async run(config: { eachBatch: (p: EachBatchPayload) => Promise<void> }) {
    this.calls.push('run');
    this.eachBatch = config.eachBatch;
  }
  pause(tps: Array<{ topic: string; partitions: number[] }>) {
    for (const tp of tps) for (const p of tp.partitions) this.pausedSet.add(`${tp.topic}:${p}`);
  }
  resume(tps: Array<{ topic: string; partitions: number[] }>) {
    for (const tp of tps) for (const p of tp.partitions) this.pausedSet.delete(`${tp.topic}:${p}`);
  }
  paused() {
    const by = new Map<string, number[]>();
    for (const k of this.pausedSet) {
      const [topic, p] = k.split(':') as [string, string];
      by.set(topic, [...(by.get(topic) ?? []), Number(p)]);
    }
    return [...by].map(([topic, partitions]) => ({ topic, partitions }));
  }
  async commitOffsets(offsets: Array<{ topic: string; partition: number; offset: string }>) {
    if (this.commitError) throw this.commitError;
    this.calls.push('commit');
    this.commits.push(offsets);
  }
  async disconnect() {
    this.calls.push('disconnect');
  }

  /** Delivers a batch of `values` starting at `first` on `partition`, as kafkajs' runner would. */
  async deliver(
    partition: number,
    first: number,
    values: Array<string | Buffer>,
    heartbeat: () => Promise<void> = async () => undefined,
  ) {
    const messages = values.map(
      (v, i) =>
        ({
          offset: String(first + i),
          key: null,
          value: Buffer.isBuffer(v) ? v : Buffer.from(v),
          timestamp: String(Date.now()),
          attributes: 0,
          headers: {},
        }) as unknown as KafkaMessage,
    );
    await this.eachBatch!({
      batch: { topic: TOPIC, partition, highWatermark: String(first + values.length), messages } as never,
      resolveOffset: (o: string) => this.resolved.set(partition, o),
      heartbeat,
      isRunning: () => true,
      isStale: () => false,
    } as unknown as EachBatchPayload);
  }
  lastCommit(partition: number): string | undefined {
    for (let i = this.commits.length - 1; i >= 0; i--) {
      const hit = this.commits[i]!.find((c) => c.partition === partition);
      if (hit) return hit.offset;
    }
    return undefined;
  }
}

/** An adapter whose writes stay open until the test releases them. */
class GatedAdapter implements SinkAdapter<{ n: number }> {
  readonly kind = 'gated';
  readonly batches: Array<{ batch: Batch<{ n: number }>; release: () => void }> = [];
  readonly written: number[] = [];
  write(batch: Batch<{ n: number }>): Promise<void> {
    return new Promise((resolve) =>
      this.batches.push({
        batch,
        release: () => {
          this.written.push(...batch.records.map((r) => r.n));
          resolve();
        },
      }),
    );
  }
  classify() {
    return 'retry' as const;
  }
  /** Releases every batch written so far, oldest first. */
  releaseAll() {
    for (const b of this.batches.splice(0)) b.release();
  }
}

const tick = () => new Promise((r) => setImmediate(r));

/**
 * Flushes the sinks while acknowledging every batch as it is written, a few rounds, so that
 * messages the bridge held for room get in and out too.
 */
async function flushAcking(sinks: Sink<{ n: number }>[], adapters: GatedAdapter[]): Promise<void> {
  const auto = setInterval(() => {
    for (const a of adapters) a.releaseAll();
  }, 1);
  try {
    for (let round = 0; round < 4; round++) {
      await Promise.all(sinks.map((s) => s.flush()));
      await tick();
      await tick();
    }
  } finally {
    clearInterval(auto);
  }
}

function setup(
  options: {
    sinks?: number;
    maxRecords?: number;
    maxPendingRecords?: number;
    route?: (r: { n: number }) => Sink<{ n: number }>[];
    pauseAfterMs?: number;
    /** More bridge options, given the sinks (e.g. offsetStores). */
    more?: (sinks: Sink<{ n: number }>[]) => Partial<KafkaBridgeOptions<{ n: number }>>;
  } = {},
) {
  const consumer = new FakeConsumer();
  const adapters = Array.from({ length: options.sinks ?? 1 }, () => new GatedAdapter());
  const sinks = adapters.map(
    (a, i) =>
      new Sink(a, {
        name: `sink-${i}`,
        maxRecords: options.maxRecords ?? 100,
        maxPendingRecords: options.maxPendingRecords ?? options.maxRecords ?? 100,
        maxAgeMs: 60_000,
        idleMs: 0,
      }),
  );
  const letters: DeadLetter<UndecodableMessage>[] = [];
  const bridge = new KafkaBridge<{ n: number }>({
    consumer: consumer as unknown as Consumer,
    topics: [TOPIC],
    decode: (m) => {
      const text = m.value?.toString() ?? '';
      if (text === 'skip') return { n: -1 };
      return /^\d+$/.test(text) ? { n: Number(text) } : new DecodeError('not a number');
    },
    route: options.route ?? ((r) => (r.n < 0 ? [] : sinks)),
    deadLetter: { write: async (l) => void letters.push(...l) },
    commitIntervalMs: 60_000,
    pauseAfterMs: options.pauseAfterMs ?? 0,
    ...options.more?.(sinks),
  });
  return { consumer, adapters, sinks, bridge, letters };
}

describe('KafkaBridge', () => {
  it('commits the offset after the last message durable in every sink it was routed to', async () => {
    const { consumer, adapters, sinks, bridge } = setup({ sinks: 2 });
    await bridge.start();
    consumer.join([0]);
    await consumer.deliver(0, 0, ['10', '11', '12']);
    const flushing = Promise.all(sinks.map((s) => s.flush()));
    adapters[0]!.releaseAll(); // durable in PostgreSQL, say, but not yet in Redis
    await tick();
    await bridge.commit();
    expect(consumer.commits).toEqual([]);
    adapters[1]!.releaseAll();
    await flushing;
    await bridge.commit();
    // Source: Apache Kafka documentation, consumer offset management: the committed offset is the
    // next offset to read, last processed + 1.
    expect(consumer.lastCommit(0)).toBe('3');
    expect(bridge.snapshot().partitions[0]).toMatchObject({
      committed: '3',
      durable: '3',
      lastSeen: '2',
      lagMessages: 0,
      pendingMessages: 0,
    });
  });

  it('never commits past a record still in flight, even when a later batch finishes first', async () => {
    const consumer = new FakeConsumer();
    const adapter = new GatedAdapter();
    const sink = new Sink(adapter, {
      maxRecords: 2,
      maxAgeMs: 60_000,
      idleMs: 0,
      concurrency: 2,
      orderingKey: () => undefined,
    });
    const bridge = new KafkaBridge<{ n: number }>({
      consumer: consumer as unknown as Consumer,
      topics: [TOPIC],
      decode: (m) => ({ n: Number(m.value) }),
      route: () => sink,
      deadLetter: { write: async () => undefined },
    });
    await bridge.start();
    consumer.join([0]);
    await consumer.deliver(0, 0, ['0', '1', '2', '3']);
    expect(adapter.batches).toHaveLength(2);
    adapter.batches[1]!.release(); // offsets 2, 3 durable; 0, 1 still in flight
    await tick();
    await bridge.commit();
    expect(consumer.commits).toEqual([]);
    adapter.batches[0]!.release();
    await tick();
    await bridge.commit();
    expect(consumer.lastCommit(0)).toBe('4');
  });

  it('moves the commit point over many taken chunks finished out of order, never past a message not yet durable', async () => {
    const consumer = new FakeConsumer();
    const adapter = new GatedAdapter();
    const sink = new Sink(adapter, {
      maxRecords: 4,
      maxPendingRecords: 10_000,
      maxAgeMs: 60_000,
      idleMs: 0,
      concurrency: 3,
      orderingKey: () => undefined,
    });
    const bridge = new KafkaBridge<{ n: number }>({
      consumer: consumer as unknown as Consumer,
      topics: [TOPIC],
      decode: (m) => ({ n: Number(m.value) }),
      route: () => sink,
      deadLetter: { write: async () => undefined },
    });
    await bridge.start();
    consumer.join([0]);
    // 150 fetched batches of 3 messages: each one is taken as a chunk of its own.
    const total = 450;
    for (let b = 0; b < total / 3; b++) {
      const first = b * 3;
      await consumer.deliver(0, first, [String(first), String(first + 1), String(first + 2)]);
    }
    expect(bridge.snapshot().partitions[0]!.pendingMessages).toBe(total);
    const flushing = sink.flush();
    const durable = new Set<number>();
    for (let round = 0; adapter.batches.length > 0 && round < 1000; round++) {
      // The newest batch in flight lands first, the oldest last.
      const open = adapter.batches.splice(0);
      for (const b of open.reverse()) {
        b.release();
        for (const r of b.batch.records) durable.add(r.n);
        await tick();
        let next = 0;
        while (durable.has(next)) next++;
        const p = bridge.snapshot().partitions[0]!;
        expect(p.durable).toBe(next === 0 ? undefined : String(next));
        // Pending: every message from the commit point on (some of them already durable).
        expect(p.pendingMessages).toBe(total - next);
      }
    }
    await flushing;
    await bridge.commit();
    expect(consumer.lastCommit(0)).toBe(String(total));
    expect(bridge.snapshot().partitions[0]).toMatchObject({ durable: String(total), pendingMessages: 0 });
  });

  it('reports the lag in seconds of the oldest pending message from its timestamp, or from when it was taken when it has none', async () => {
    const { consumer, bridge } = setup();
    await bridge.start();
    consumer.join([0, 1]);
    const batch = (partition: number, timestamp: string | undefined) =>
      consumer.eachBatch!({
        batch: {
          topic: TOPIC,
          partition,
          highWatermark: '2',
          messages: ['1', '2'].map((value, i) => ({
            offset: String(i),
            key: null,
            value: Buffer.from(value),
            timestamp,
            attributes: 0,
            headers: {},
          })),
        } as never,
        resolveOffset: () => undefined,
        heartbeat: async () => undefined,
        isRunning: () => true,
        isStale: () => false,
      } as unknown as EachBatchPayload);
    const before = Date.now();
    await batch(0, String(before - 60_000)); // produced a minute ago
    await batch(1, undefined); // no timestamp: taken now
    const [p0, p1] = bridge.snapshot().partitions;
    expect(p0).toMatchObject({ partition: 0, pendingMessages: 2 });
    expect(p0!.lagSeconds).toBeGreaterThanOrEqual(60);
    expect(p0!.lagSeconds).toBeLessThan(60 + (Date.now() - before) / 1000 + 1);
    expect(p1).toMatchObject({ partition: 1, pendingMessages: 2 });
    expect(p1!.lagSeconds).toBeGreaterThanOrEqual(0);
    expect(p1!.lagSeconds).toBeLessThanOrEqual((Date.now() - before) / 1000);
  });

  it('dead-letters an undecodable message with its coordinates and raw bytes, and commits past it once stored', async () => {
    const { consumer, adapters, sinks, bridge, letters } = setup();
    await bridge.start();
    consumer.join([2]);
    const raw = Buffer.from([0xde, 0xad, 0xbe, 0xef]);
    await consumer.deliver(2, 40, ['1', raw, 'skip', '2']);
    await flushAcking(sinks, adapters);
    await bridge.stop({ timeoutMs: 5000 });
    expect(letters).toHaveLength(1);
    expect(letters[0]).toMatchObject({
      reason: 'decode',
      meta: { topic: TOPIC, partition: 2, offset: '41' },
    });
    expect(letters[0]!.record.value?.equals(raw)).toBe(true);
    expect((letters[0]!.error as DecodeError).code).toBe('SPILLWAY_DECODE_ERROR');
    // 41 (dead-lettered) and 42 (routed nowhere) do not hold the commit point back.
    expect(consumer.lastCommit(2)).toBe('44');
    expect(adapters[0]!.written).toEqual([1, 2]);
  });

  it('holds the messages a full sink refused, pauses their partition, and resumes once there is room', async () => {
    const { consumer, adapters, sinks, bridge } = setup({ sinks: 2, maxRecords: 2, maxPendingRecords: 2 });
    await bridge.start();
    consumer.join([0, 1]);
    await consumer.deliver(0, 0, ['0', '1', '2', '3']);
    // Both sinks took 0 and 1; sink 0 was full at 2, so 2 and the rest of the batch are held and
    // partition 0 pauses. The batch is taken whole: kafkajs fetches from 4 after the resume.
    expect(consumer.pausedSet.has(`${TOPIC}:0`)).toBe(true);
    expect(consumer.resolved.get(0)).toBe('3');
    expect(bridge.snapshot().partitions.find((p) => p.partition === 0)).toMatchObject({
      paused: true,
      heldMessages: 2,
      pendingMessages: 4,
    });
    // A batch fetched before the pause is left unresolved for kafkajs to fetch again.
    await consumer.deliver(0, 4, ['4']);
    expect(consumer.resolved.get(0)).toBe('3');
    await bridge.commit();
    expect(consumer.commits).toEqual([]);
    adapters[0]!.releaseAll();
    adapters[1]!.releaseAll();
    await tick();
    await tick();
    expect(consumer.pausedSet.has(`${TOPIC}:0`)).toBe(false);
    expect(bridge.snapshot().partitions.find((p) => p.partition === 0)).toMatchObject({
      paused: false,
      heldMessages: 0,
    });
    await consumer.deliver(0, 4, ['4']);
    await flushAcking(sinks, adapters);
    await bridge.commit();
    // Each sink got each message exactly once, in order.
    expect(adapters[0]!.written).toEqual([0, 1, 2, 3, 4]);
    expect(adapters[1]!.written).toEqual([0, 1, 2, 3, 4]);
    expect(consumer.lastCommit(0)).toBe('5');
  });

  it('waits in the handler for room before pausing, so a sink that drains in time costs no pause', async () => {
    const { consumer, adapters, sinks, bridge } = setup({
      sinks: 2,
      maxRecords: 2,
      maxPendingRecords: 2,
      pauseAfterMs: 60_000,
    });
    await bridge.start();
    consumer.join([0]);
    const beats: number[] = [];
    // Both sinks are full after 0 and 1: the handler holds 2 and 3 and waits instead of pausing.
    const delivered = consumer.deliver(0, 0, ['0', '1', '2', '3'], async () => {
      beats.push(bridge.snapshot().partitions[0]!.heldMessages);
    });
    await tick();
    expect(consumer.pausedSet.size).toBe(0);
    expect(bridge.snapshot().partitions[0]).toMatchObject({ paused: false, heldMessages: 2 });
    // Room frees up: the held messages go in and the handler returns without a pause.
    adapters[0]!.releaseAll();
    adapters[1]!.releaseAll();
    await delivered;
    expect(consumer.pausedSet.size).toBe(0);
    expect(bridge.snapshot()).toMatchObject({ pauses: 0 });
    expect(beats.at(-1)).toBe(0);
    await flushAcking(sinks, adapters);
    await bridge.commit();
    expect(adapters[0]!.written).toEqual([0, 1, 2, 3]);
    expect(adapters[1]!.written).toEqual([0, 1, 2, 3]);
    expect(consumer.lastCommit(0)).toBe('4');
  });

  it('pauses a partition whose held messages find no room within pauseAfterMs, and resumes it later', async () => {
    const { consumer, adapters, sinks, bridge } = setup({
      maxRecords: 2,
      maxPendingRecords: 2,
      pauseAfterMs: 50,
    });
    await bridge.start();
    consumer.join([0]);
    await consumer.deliver(0, 0, ['0', '1', '2']);
    // The handler gave up waiting (the sink never wrote) and paused the partition.
    expect(consumer.pausedSet.has(`${TOPIC}:0`)).toBe(true);
    expect(bridge.snapshot()).toMatchObject({ pauses: 1 });
    adapters[0]!.releaseAll();
    await tick();
    await tick();
    expect(consumer.pausedSet.has(`${TOPIC}:0`)).toBe(false);
    await flushAcking(sinks, adapters);
    await bridge.commit();
    expect(adapters[0]!.written).toEqual([0, 1, 2]);
    expect(consumer.lastCommit(0)).toBe('3');
  });

  it('stops promptly while a handler waits for room', async () => {
    const { consumer, adapters, bridge } = setup({
      maxRecords: 2,
      maxPendingRecords: 2,
      pauseAfterMs: 60_000,
    });
    await bridge.start();
    consumer.join([0]);
    const delivered = consumer.deliver(0, 0, ['0', '1', '2']);
    await tick();
    const auto = setInterval(() => adapters[0]!.releaseAll(), 1);
    try {
      // stop() waits for the running handler, which leaves its wait when the bridge drains
      // (not after pauseAfterMs: the test would time out).
      await bridge.stop({ timeoutMs: 5000 });
      await delivered;
    } finally {
      clearInterval(auto);
    }
    expect(consumer.calls.at(-1)).toBe('disconnect');
    // 2 was held, never taken by the sink: not committed.
    expect(consumer.lastCommit(0)).toBe('2');
  });

  it('lets a sink with room take a chunk while another sink of the same route is full, and commits only what both made durable', async () => {
    const big = new GatedAdapter();
    const bigSink = new Sink(big, { name: 'big', maxRecords: 100, maxAgeMs: 60_000, idleMs: 0 });
    let small: Sink<{ n: number }> | undefined;
    const { consumer, adapters, sinks, bridge } = setup({
      maxRecords: 2,
      maxPendingRecords: 2,
      pauseAfterMs: 0,
      route: () => [small!, bigSink],
    });
    small = sinks[0]!;
    await bridge.start();
    consumer.join([0]);
    await consumer.deliver(0, 0, ['0', '1', '2', '3', '4']);
    // The small sink took 0 and 1 and is full; the big one took the whole chunk.
    expect(bigSink.pending().buffered).toBe(5);
    expect(bridge.snapshot().partitions[0]).toMatchObject({ paused: true, heldMessages: 3 });
    const flushed = bigSink.flush();
    big.releaseAll();
    await flushed;
    await bridge.commit();
    // Durable in the big sink only: nothing may be committed yet.
    expect(consumer.commits).toEqual([]);
    await flushAcking([small, bigSink], [adapters[0]!, big]);
    await bridge.commit();
    expect(adapters[0]!.written).toEqual([0, 1, 2, 3, 4]);
    expect(big.written).toEqual([0, 1, 2, 3, 4]);
    expect(consumer.lastCommit(0)).toBe('5');
  });

  it('keeps offset order per sink when the router alternates between single sinks', async () => {
    const a = new GatedAdapter();
    const b = new GatedAdapter();
    const sinkA = new Sink(a, { name: 'a', maxRecords: 100, maxAgeMs: 60_000, idleMs: 0 });
    const sinkB = new Sink(b, { name: 'b', maxRecords: 100, maxAgeMs: 60_000, idleMs: 0 });
    const consumer = new FakeConsumer();
    const bridge = new KafkaBridge<{ n: number }>({
      consumer: consumer as unknown as Consumer,
      topics: [TOPIC],
      decode: (m) => ({ n: Number(m.value?.toString()) }),
      route: (r) => (r.n % 3 === 0 ? sinkA : sinkB),
      deadLetter: { write: async () => undefined },
      commitIntervalMs: 60_000,
    });
    await bridge.start();
    consumer.join([0]);
    await consumer.deliver(0, 0, ['0', '1', '2', '3', '4', '5', '6', '7']);
    await flushAcking([sinkA, sinkB], [a, b]);
    await bridge.commit();
    expect(a.written).toEqual([0, 3, 6]);
    expect(b.written).toEqual([1, 2, 4, 5, 7]);
    expect(consumer.lastCommit(0)).toBe('8');
  });

  it('skips offsets redelivered after a rejoin that kept the partition', async () => {
    const { consumer, adapters, bridge } = setup();
    await bridge.start();
    consumer.join([0]);
    await consumer.deliver(0, 0, ['0', '1', '2']);
    consumer.join([0]); // kept: kafkajs restarts from the broker's committed offset (none yet)
    await consumer.deliver(0, 0, ['0', '1', '2', '3']);
    const auto = setInterval(() => adapters[0]!.releaseAll(), 1);
    try {
      await bridge.stop({ timeoutMs: 5000 });
    } finally {
      clearInterval(auto);
    }
    expect(bridge.snapshot().skippedRedeliveries).toBe(3);
    expect(adapters[0]!.written).toEqual([0, 1, 2, 3]);
    expect(consumer.lastCommit(0)).toBe('4');
  });

  it('fences commits: not for revoked partitions, never backwards, and not from records of an earlier ownership', async () => {
    const { consumer, adapters, sinks, bridge } = setup();
    await bridge.start();
    consumer.join([0, 1]);
    await consumer.deliver(0, 0, ['0', '1']);
    await consumer.deliver(1, 0, ['5']);
    await flushAcking(sinks, adapters);
    await bridge.commit();
    expect(consumer.commits.at(-1)).toEqual([
      { topic: TOPIC, partition: 0, offset: '2' },
      { topic: TOPIC, partition: 1, offset: '1' },
    ]);
    // Partition 1 moves away; its late records must not be committed by this member.
    await consumer.deliver(1, 1, ['6']);
    consumer.join([0]);
    await flushAcking(sinks, adapters);
    const before = consumer.commits.length;
    await bridge.commit();
    expect(consumer.commits.length).toBe(before); // nothing new: partition 0 unchanged, 1 not owned
    // Expelled and joined afresh with a new member id: the partition's state starts over from
    // what is delivered, and a point below this member's earlier commit of 2 is never sent.
    consumer.join([0], 'member-2');
    await consumer.deliver(0, 0, ['0']);
    await flushAcking(sinks, adapters);
    await bridge.commit();
    expect(consumer.commits.length).toBe(before);
    expect(bridge.snapshot().skippedRedeliveries).toBe(0); // state was dropped, so 0 was taken again
    await consumer.deliver(0, 1, ['1', '2']);
    await flushAcking(sinks, adapters);
    await bridge.commit();
    expect(consumer.lastCommit(0)).toBe('3');
  });

  it('counts the messages it took past its last commit of a partition it loses, the bound of what the next owner reads again', async () => {
    const { consumer, adapters, sinks, bridge } = setup();
    await bridge.start();
    consumer.join([0, 1]);
    await consumer.deliver(0, 0, ['0', '1', '2']);
    await consumer.deliver(1, 10, ['10', '11']);
    await flushAcking(sinks, adapters);
    await bridge.commit();
    expect(consumer.lastCommit(1)).toBe('12');
    // Three more of partition 1 become durable, but the partition moves before a commit.
    await consumer.deliver(1, 12, ['12', '13', '14']);
    await flushAcking(sinks, adapters);
    consumer.join([0]);
    expect(bridge.snapshot().uncommittedAtRevoke).toBe(3);
    // A partition that never saw a commit counts from the first offset it took.
    consumer.join([0, 2]);
    await consumer.deliver(2, 40, ['40', '41']);
    consumer.join([0]);
    expect(bridge.snapshot().uncommittedAtRevoke).toBe(5);
    // A clean stop commits everything first: nothing more is counted at the disconnect.
    await consumer.deliver(0, 3, ['3']);
    const auto = setInterval(() => adapters[0]!.releaseAll(), 1);
    try {
      await bridge.stop({ timeoutMs: 5000 });
    } finally {
      clearInterval(auto);
    }
    expect(consumer.lastCommit(0)).toBe('4');
    expect(bridge.snapshot().uncommittedAtRevoke).toBe(5);
  });

  it('on a rebalance signal from heartbeat, flushes and commits before rethrowing the same error', async () => {
    const { consumer, adapters, bridge } = setup();
    await bridge.start();
    consumer.join([0]);
    const rebalance = Object.assign(new Error('The group is rebalancing'), { type: 'REBALANCE_IN_PROGRESS' });
    const order: string[] = [];
    // The gated store acknowledges each batch as soon as it is written.
    const auto = setInterval(() => adapters[0]!.releaseAll(), 1);
    try {
      const delivered = consumer.deliver(0, 0, ['0', '1', '2'], async () => {
        order.push('heartbeat');
        throw rebalance;
      });
      await expect(delivered).rejects.toBe(rebalance);
    } finally {
      clearInterval(auto);
    }
    order.push(...consumer.calls.filter((c) => c === 'commit'));
    expect(order).toEqual(['heartbeat', 'commit']);
    expect(consumer.lastCommit(0)).toBe('3');
    expect(adapters[0]!.written).toEqual([0, 1, 2]);
    expect(bridge.snapshot().rebalanceFlushes).toBe(1);
  });

  it('stops in order: pause everything, flush, commit, disconnect', async () => {
    const { consumer, adapters, bridge } = setup();
    await bridge.start();
    consumer.join([0, 1]);
    await consumer.deliver(0, 0, ['0']);
    await consumer.deliver(1, 0, ['1']);
    const auto = setInterval(() => adapters[0]!.releaseAll(), 1);
    try {
      await bridge.stop({ timeoutMs: 5000 });
    } finally {
      clearInterval(auto);
    }
    expect(consumer.pausedSet).toEqual(new Set([`${TOPIC}:0`, `${TOPIC}:1`]));
    expect(consumer.calls.slice(-2)).toEqual(['commit', 'disconnect']);
    expect(adapters[0]!.written).toEqual([0, 1]);
    expect(bridge.state).toBe('stopped');
    // Nothing is taken once stopping began.
    await consumer.deliver(0, 1, ['2']);
    expect(bridge.snapshot().messages).toBe(2);
  });

  it('resolves a commit refused by a rebalance, and rejects other commit failures with the Kafka error type', async () => {
    const { consumer, adapters, sinks, bridge } = setup();
    await bridge.start();
    consumer.join([0]);
    await consumer.deliver(0, 0, ['0']);
    const f = sinks[0]!.flush();
    adapters[0]!.releaseAll();
    await f;
    consumer.commitError = Object.assign(new Error('not the current generation'), {
      type: 'ILLEGAL_GENERATION',
    });
    await expect(bridge.commit()).resolves.toBeUndefined();
    consumer.commitError = Object.assign(new Error('denied'), { type: 'GROUP_AUTHORIZATION_FAILED' });
    await expect(bridge.commit()).rejects.toMatchObject({
      code: 'SPILLWAY_STORE_ERROR',
      driverCode: 'GROUP_AUTHORIZATION_FAILED',
    });
    expect(bridge.snapshot().commitErrors).toBe(2);
  });

  it('rejects a stop() timeoutMs that is not a finite number > 0, naming the option, and stays running', async () => {
    const { consumer, bridge } = setup();
    await bridge.start();
    for (const bad of [0, -1, Number.NaN, Number.POSITIVE_INFINITY, '5000' as unknown as number]) {
      const error = await bridge.stop({ timeoutMs: bad }).catch((e: unknown) => e);
      expect(error).toBeInstanceOf(TypeError);
      expect(error).toMatchObject({
        code: 'SPILLWAY_INVALID_OPTION',
        message: expect.stringMatching(/`timeoutMs`/),
      });
    }
    expect(bridge.state).toBe('running');
    expect(consumer.calls).not.toContain('disconnect');
    await bridge.stop({ timeoutMs: 5000 });
    expect(bridge.state).toBe('stopped');
  });

  it('keeps newly assigned partitions paused until every offset store is read, then hands each sink only the messages at or past its stored offset', async () => {
    const reads: Array<{ group: string; partitions: number[]; done: () => void }> = [];
    // Sink 0 stored offset 3 of partition 0, sink 1 offset 1; neither stored anything for partition 1.
    const storedBy = [new Map([[0, '3']]), new Map([[0, '1']])];
    const store = (k: number): OffsetStore => ({
      storedOffsets: (group, partitions) =>
        new Promise((resolve) =>
          reads.push({
            group,
            partitions: partitions.map((p) => p.partition),
            done: () =>
              resolve(
                partitions.flatMap((p) => {
                  const offset = storedBy[k]!.get(p.partition);
                  return offset === undefined ? [] : [{ topic: p.topic, partition: p.partition, offset }];
                }),
              ),
          }),
        ),
    });
    const { consumer, adapters, sinks, bridge } = setup({
      sinks: 2,
      more: (s) => ({
        groupId: 'dock-status-writer',
        offsetStores: s.map((sink, k) => ({ sink, store: store(k) })),
      }),
    });
    await bridge.start();
    consumer.join([0, 1]);
    // Paused at once, inside the GROUP_JOIN listener, before kafkajs can fetch.
    expect(consumer.pausedSet).toEqual(new Set([`${TOPIC}:0`, `${TOPIC}:1`]));
    await tick();
    // One read per store for all partitions of the assignment, under the bridge's group.
    expect(reads.map((r) => [r.group, r.partitions])).toEqual([
      ['dock-status-writer', [0, 1]],
      ['dock-status-writer', [0, 1]],
    ]);
    // A batch fetched before the pause is not taken while the reads are out (nor resolved).
    await consumer.deliver(0, 0, ['0', '1', '2', '3', '4']);
    expect(bridge.snapshot().messages).toBe(0);
    expect(consumer.resolved.get(0)).toBeUndefined();
    for (const r of reads) r.done();
    await tick();
    expect(consumer.pausedSet).toEqual(new Set());
    await consumer.deliver(0, 0, ['0', '1', '2', '3', '4']);
    await consumer.deliver(1, 0, ['5', '6']);
    const flushing = Promise.all(sinks.map((s) => s.flush()));
    for (const a of adapters) a.releaseAll();
    await flushing;
    expect(adapters[0]!.written).toEqual([3, 4, 5, 6]);
    expect(adapters[1]!.written).toEqual([1, 2, 3, 4, 5, 6]);
    // Offset 0 went to no sink; 1 and 2 to one of them.
    expect(bridge.snapshot().skippedStored).toBe(3);
    // The Kafka commit still happens, past the skipped messages too.
    await bridge.commit();
    expect(consumer.lastCommit(0)).toBe('5');
    expect(consumer.lastCommit(1)).toBe('2');
  });

  it('retries a failed read of the stored offsets while the partitions stay paused, and fails the bridge on a misconfigured store', async () => {
    let calls = 0;
    const flaky: OffsetStore = {
      storedOffsets: async () => {
        calls++;
        if (calls === 1)
          throw Object.assign(new Error('connect ECONNREFUSED 127.0.0.1:5432'), { code: 'ECONNREFUSED' });
        return [];
      },
    };
    const { consumer, bridge } = setup({
      more: (s) => ({ groupId: 'g', offsetStores: [{ sink: s[0]!, store: flaky }] }),
    });
    const errors: Array<{ fatal: boolean }> = [];
    bridge.on('error', (e) => errors.push(e));
    await bridge.start();
    consumer.join([0]);
    await tick();
    expect(errors).toEqual([expect.objectContaining({ fatal: false })]);
    expect(consumer.pausedSet).toEqual(new Set([`${TOPIC}:0`]));
    await new Promise((r) => setTimeout(r, 400));
    expect(calls).toBe(2);
    expect(consumer.pausedSet).toEqual(new Set());

    const misconfigured: OffsetStore = {
      storedOffsets: async () => {
        throw new TypeError('Expected `groupId` to be the group the sink stores offsets for');
      },
    };
    const second = setup({
      more: (s) => ({ groupId: 'g', offsetStores: [{ sink: s[0]!, store: misconfigured }] }),
    });
    await second.bridge.start();
    second.consumer.join([0]);
    await tick();
    await tick();
    expect(second.bridge.state).toBe('failed');
  });

  it('rejects bad options with a TypeError that names the option', () => {
    const base = {
      consumer: new FakeConsumer() as unknown as Consumer,
      topics: [TOPIC],
      decode: () => 1,
      route: () => undefined,
      deadLetter: { write: async () => undefined },
    };
    expect(() => new KafkaBridge({ ...base, commitIntervalMs: -5 })).toThrow(
      /Expected `commitIntervalMs` to be a finite number > 0, got `-5`/,
    );
    expect(() => new KafkaBridge({ ...base, pauseAfterMs: -1 })).toThrow(
      /Expected `pauseAfterMs` to be a finite number >= 0, got `-1`/,
    );
    expect(() => new KafkaBridge({ ...base, pauseAfterMs: 0 })).not.toThrow();
    expect(() => new KafkaBridge({ ...base, topics: [] })).toThrow(/`topics`/);
    expect(() => new KafkaBridge({ ...base, deadLetter: undefined as never })).toThrow(/`deadLetter`/);
    expect(() => new KafkaBridge({ ...base, consumer: undefined as never })).toThrow(/`kafka`/);
    expect(() => new KafkaBridge({ ...base, colour: 'red' } as never)).toThrow(TypeError);
    const sink = new Sink(new GatedAdapter());
    const store: OffsetStore = { storedOffsets: async () => [] };
    expect(() => new KafkaBridge({ ...base, offsetStores: [{ sink, store }] })).toThrow(/`groupId`/);
    expect(
      () => new KafkaBridge({ ...base, groupId: 'g', offsetStores: [{ sink, store: {} as never }] }),
    ).toThrow(/`offsetStores\[0\].store`/);
    expect(() => new KafkaBridge({ ...base, groupId: 'g', offsetStores: [{ sink, store }] })).not.toThrow();
  });
});
