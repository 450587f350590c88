// The transactional Kafka sink on its own, against the shared broker: records carry the source
// coordinates a KafkaBridge gives them, and the test reads back the output (read_committed) and
// the offsets group. The process-level tests are in kafka-exactly-once.test.ts.
import { type DeadLetter, type DeadLetterTarget, Sink } from '@spillway/core';
import { kafkaTransactionalAdapter } from '@spillway/kafka';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { StableOffsetReader } from '../../packages/kafka/src/stable-offsets.js';
import { services, type TestKafka, uniqueName, waitFor, withKafka } from '../harness/index.js';
import { readTopicJava } from './workers/read-topic.js';

interface DockReport {
  seq: number;
  dock: string;
}

let k: TestKafka;

beforeAll(async () => {
  k = await withKafka();
});

afterAll(async () => {
  await k?.drop();
});

class CollectedDeadLetters<T> implements DeadLetterTarget<T> {
  readonly letters: DeadLetter<T>[] = [];
  async write(letters: readonly DeadLetter<T>[]): Promise<void> {
    this.letters.push(...letters);
  }
}

async function setup(prefix: string) {
  const source = await k.topic(3, `${prefix}_src`);
  const output = await k.topic(3, `${prefix}_out`);
  const group = uniqueName(prefix);
  return { source, output, group, offsetsGroup: `spillway-${group}` };
}

function sinkFor(
  o: { output: string; group: string },
  deadLetter: DeadLetterTarget<DockReport>,
  mapper?: (r: DockReport) => { key: string; value: string },
) {
  const adapter = kafkaTransactionalAdapter<DockReport>({
    kafka: k.kafka,
    group: o.group,
    topic: o.output,
    mapper: mapper ?? ((r) => ({ key: r.dock, value: JSON.stringify(r) })),
  });
  const sink = new Sink<DockReport>(adapter, { maxRecords: 500, maxAgeMs: 50, deadLetter });
  return { adapter, sink };
}

/** Records 0 … n-1 as a bridge would hand them over: event `seq` from source partition `seq % 3`. */
async function feed(sink: Sink<DockReport>, source: string, n: number, from = 0): Promise<void> {
  for (let seq = from; seq < n; seq++)
    await sink.write(
      { seq, dock: `dock-${seq % 97}` },
      { topic: source, partition: seq % 3, offset: String(Math.floor(seq / 3)) },
    );
}

async function stored(group: string, topic: string): Promise<Record<string, number>> {
  const [t] = await k.admin.fetchOffsets({ groupId: group, topics: [topic] });
  return Object.fromEntries((t?.partitions ?? []).map((p) => [String(p.partition), Number(p.offset)]));
}

/**
 * The stored offsets once they equal `expected`, or as they are after 10 s. kafkajs' commit()
 * returns when the broker logged the decision, before the markers are written; an offset commit
 * in a transaction shows in OffsetFetch (without require_stable, as kafkajs sends it) only then.
 */
async function storedOnceSettled(
  group: string,
  topic: string,
  expected: Record<string, number>,
): Promise<Record<string, number>> {
  let last: Record<string, number> = {};
  await waitFor(
    'the stored offsets',
    async () => {
      last = await stored(group, topic);
      return JSON.stringify(last) === JSON.stringify(expected) ? true : undefined;
    },
    { timeoutMs: 10_000, intervalMs: 50 },
  ).catch(() => undefined);
  return last;
}

describe('the transactional Kafka sink', () => {
  it("commits each source partition's records with its next offset, and a replay of the same records writes nothing again", async () => {
    const o = await setup('txn_replay');
    const first = sinkFor(o, new CollectedDeadLetters());
    await feed(first.sink, o.source, 3000);
    await first.sink.close();
    // Source: Apache Kafka documentation, consumer offset management: a committed offset is the
    // next offset to read (last processed + 1); each source partition got offsets 0 … 999.
    const thousand = { '0': 1000, '1': 1000, '2': 1000 };
    expect(await storedOnceSettled(o.offsetsGroup, o.source, thousand)).toEqual(thousand);
    expect(first.adapter.stats()).toMatchObject({ fencedOut: 0, skippedStored: 0 });
    // The adapter reads them with OffsetFetch v7 and require_stable (KIP-447), which kafkajs lacks.
    const reader = StableOffsetReader.open(k.kafka);
    expect(reader).toBeDefined();
    expect(await reader!.read(o.offsetsGroup, o.source, 1)).toEqual({ offset: 1000n });
    expect(await reader!.read(`${o.offsetsGroup}-none`, o.source, 1)).toEqual({ offset: undefined });
    await reader!.close();

    // A restart that reads the source again from further back: the new producers fence, read the
    // stored offsets, and find every record stored.
    const again = sinkFor(o, new CollectedDeadLetters());
    await feed(again.sink, o.source, 3000);
    await again.sink.close();
    expect(again.adapter.stats()).toMatchObject({ skippedStored: 3000, transactions: 0, fences: 3 });

    const values = (await readTopicJava(services().kafkaBrokers, o.output)).map(
      (v) => (JSON.parse(v) as DockReport).seq,
    );
    expect(values.length).toBe(3000);
    expect(new Set(values).size).toBe(3000);
  });

  it('writes a source message once when a batch holds it twice (a bridge fetched it again after a rebalance while the first copy still waited in the sink)', async () => {
    const o = await setup('txn_twice');
    const adapter = kafkaTransactionalAdapter<DockReport>({
      kafka: k.kafka,
      group: o.group,
      topic: o.output,
      mapper: (r) => ({ key: r.dock, value: JSON.stringify(r) }),
    });
    // One batch of both copies: no flush by size or age before close().
    const sink = new Sink<DockReport>(adapter, { maxRecords: 10_000, maxAgeMs: 60_000, idleMs: 0 });
    await feed(sink, o.source, 300);
    await feed(sink, o.source, 300, 150);
    await sink.close();
    expect(sink.snapshot()).toMatchObject({ written: 450, deadLettered: 0 });
    const hundred = { '0': 100, '1': 100, '2': 100 };
    expect(await storedOnceSettled(o.offsetsGroup, o.source, hundred)).toEqual(hundred);
    const values = (await readTopicJava(services().kafkaBrokers, o.output)).map(
      (v) => (JSON.parse(v) as DockReport).seq,
    );
    expect(values.length).toBe(300);
    expect(new Set(values).size).toBe(300);
  });

  it('dead-letters a record its mapper refuses, writes the rest of its source partition once, and stores the offset past it', async () => {
    const o = await setup('txn_mapper');
    const dead = new CollectedDeadLetters<DockReport>();
    const { adapter, sink } = sinkFor(o, dead, (r) => {
      if (r.seq === 150) throw new TypeError('no dock for this report');
      return { key: r.dock, value: JSON.stringify(r) };
    });
    await feed(sink, o.source, 300);
    await sink.close();
    expect(dead.letters.map((l) => [l.record.seq, l.reason])).toEqual([[150, 'rejected']]);
    expect(String(dead.letters[0]!.error)).toMatch(
      /Kafka mapper failed for a record: no dock for this report/,
    );
    const hundred = { '0': 100, '1': 100, '2': 100 };
    expect(await storedOnceSettled(o.offsetsGroup, o.source, hundred)).toEqual(hundred);
    const values = (await readTopicJava(services().kafkaBrokers, o.output)).map(
      (v) => (JSON.parse(v) as DockReport).seq,
    );
    expect(values.length).toBe(299);
    expect(new Set(values).size).toBe(299);
    expect(values).not.toContain(150);
    expect(adapter.stats().fencedOut).toBe(0);
  });

  it('stops with an error that names the cause when a record did not come through a bridge', async () => {
    const o = await setup('txn_nosource');
    const { sink } = sinkFor(o, new CollectedDeadLetters());
    const failed = new Promise<unknown>((resolve) => sink.on('error', (e) => resolve(e.error)));
    await sink.write({ seq: 1, dock: 'dock-1' });
    await sink.flush().catch(() => undefined);
    expect(String(await failed)).toMatch(/takes records from a KafkaBridge only/);
    expect(sink.state).toBe('failed');
    await sink.close().catch(() => undefined);
    expect(await readTopicJava(services().kafkaBrokers, o.output)).toEqual([]);
  });
});
