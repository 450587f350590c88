// Offsets stored with the data in Redis (`storeOffsets`), against the real server: each batch is one
// script that also stores its next offsets, so a replay of stored records — by a restarted
// consumer, a stale one, or a script whose reply was lost — writes nothing twice, even with
// commands that are not idempotent (RPUSH, XADD with server-made ids, INCRBY).
// The kill -9 test across consumer processes is redis-exactly-once-kill.test.ts.
import {
  type DeadLetter,
  type DeadLetterTarget,
  type RecordMeta,
  Sink,
  type SinkOptions,
} from '@spillway/core';
import {
  commandMapping,
  counter,
  type RedisAdapter,
  type RedisMapping,
  redisAdapter,
  streamEntry,
} from '@spillway/redis';
import { Redis } from 'ioredis';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { startPrivateRedis, type TestRedis, withRedis } from '../harness/index.js';

interface DockEvent {
  seq: number;
  dock: string;
}

class CollectedDeadLetters<T> implements DeadLetterTarget<T> {
  readonly letters: DeadLetter<T>[] = [];
  async write(letters: readonly DeadLetter<T>[]): Promise<void> {
    this.letters.push(...letters);
  }
}

const TOPIC = 'tandem.dock-events';
const PARTITIONS = 3;

/** Event `seq` is at partition `seq % 3`, offset `floor(seq / 3)`, as a round-robin producer puts it. */
function meta(seq: number): RecordMeta {
  return { topic: TOPIC, partition: seq % PARTITIONS, offset: String(Math.floor(seq / PARTITIONS)) };
}

let r: TestRedis;
beforeAll(async () => {
  r = await withRedis('redis_offsets');
});
afterAll(async () => {
  await r?.drop();
});

let n = 0;
function keys() {
  n++;
  return { data: `${r.prefix}data_${n}`, offsets: `${r.prefix}offsets_${n}` };
}

function rpush(key: string): RedisMapping<DockEvent> {
  return commandMapping<DockEvent>({
    name: 'dock-list',
    idempotent: false,
    commands: (e) => ['RPUSH', key, String(e.seq)],
  });
}

function sinkFor(
  mapping: RedisMapping<DockEvent>,
  offsetsKey: string,
  options: SinkOptions<DockEvent> = {},
  client: Redis = r.redis,
) {
  const deadLetters = new CollectedDeadLetters<DockEvent>();
  const adapter = redisAdapter<DockEvent>({
    client,
    mapping,
    storeOffsets: { group: 'dock-writer', key: offsetsKey },
  });
  const sink = new Sink(adapter, {
    maxRecords: 500,
    retry: { baseDelayMs: 20, maxDelayMs: 200 },
    deadLetter: deadLetters,
    ...options,
  });
  return { sink, adapter, deadLetters };
}

async function writeRange(sink: Sink<DockEvent>, from: number, to: number): Promise<void> {
  for (let seq = from; seq < to; seq++) await sink.write({ seq, dock: `dock-${seq % 97}` }, meta(seq));
  await sink.flush();
}

/** Every element of a list as numbers, and how many distinct ones. */
async function listSeqs(key: string): Promise<{ count: number; distinct: number; sum: number }> {
  const items = (await r.redis.lrange(key, 0, -1)).map(Number);
  return { count: items.length, distinct: new Set(items).size, sum: items.reduce((a, b) => a + b, 0) };
}

const sumTo = (k: number) => (k * (k - 1)) / 2;

describe('Redis storeOffsets', () => {
  it('a replay of stored records adds nothing to a list, and an overlapping one adds only the records past the stored offsets', async () => {
    const k = keys();
    const { sink, adapter } = sinkFor(rpush(k.data), k.offsets);
    await writeRange(sink, 0, 3000);
    expect(await listSeqs(k.data)).toEqual({ count: 3000, distinct: 3000, sum: sumTo(3000) });
    // The next offset to read per partition (Apache Kafka documentation, consumer offset
    // management: the committed position is the last processed offset + 1).
    expect(await r.redis.hgetall(k.offsets)).toEqual({
      [`dock-writer/${TOPIC}/0`]: '1000',
      [`dock-writer/${TOPIC}/1`]: '1000',
      [`dock-writer/${TOPIC}/2`]: '1000',
    });

    await writeRange(sink, 0, 3000); // a replay from the start
    await writeRange(sink, 1500, 4500); // half stored, half new
    await sink.close();
    expect(await listSeqs(k.data)).toEqual({ count: 4500, distinct: 4500, sum: sumTo(4500) });
    const stats = adapter.stats();
    expect(stats.alreadyStored).toBe(3000 + 1500);
    expect(stats.offsetConflicts).toBeGreaterThan(0);
    expect(sink.snapshot().written).toBe(3000 + 3000 + 3000);
  });

  it('a batch that holds a source message twice (fetched again after a rebalance while the first copy waited) adds it to a list once', async () => {
    const k = keys();
    const { sink, adapter } = sinkFor(rpush(k.data), k.offsets, {
      maxRecords: 10_000,
      maxAgeMs: 60_000,
      idleMs: 0,
    });
    for (let seq = 0; seq < 300; seq++) await sink.write({ seq, dock: `dock-${seq % 97}` }, meta(seq));
    for (let seq = 150; seq < 300; seq++) await sink.write({ seq, dock: `dock-${seq % 97}` }, meta(seq));
    await sink.close();
    expect(sink.snapshot()).toMatchObject({ written: 450, deadLettered: 0 });
    expect(await listSeqs(k.data)).toEqual({ count: 300, distinct: 300, sum: sumTo(300) });
    expect(adapter.stats().alreadyStored).toBe(150);
  });

  it('a stream with server-made ids and a plain counter take each record once across a replay', async () => {
    const k = keys();
    const stream = sinkFor(
      streamEntry<DockEvent>({ key: () => k.data, fields: (e) => ({ seq: e.seq, dock: e.dock }) }),
      k.offsets,
    );
    await writeRange(stream.sink, 0, 2000);
    await writeRange(stream.sink, 0, 2400);
    await stream.sink.close();
    const entries = await r.redis.xrange(k.data, '-', '+');
    const seqs = new Set(entries.map(([, f]) => f[f.indexOf('seq') + 1]));
    expect({ entries: entries.length, distinct: seqs.size }).toEqual({ entries: 2400, distinct: 2400 });

    const c = keys();
    const rentals = sinkFor(counter<DockEvent>({ key: () => c.data, by: (e) => e.seq }), c.offsets);
    await writeRange(rentals.sink, 0, 2000);
    await writeRange(rentals.sink, 1000, 3000);
    await rentals.sink.close();
    expect(Number(await r.redis.get(c.data))).toBe(sumTo(3000));
  });

  it('a script whose reply never came still ran; the retry finds its offsets stored and adds nothing', async () => {
    // The pause below holds every client of the server: a private one, not the shared one.
    const server = await startPrivateRedis();
    // Replies slower than 150 ms time out in the client: the outcome is unknown.
    const client = new Redis(server.url, { commandTimeout: 150 });
    const admin = new Redis(server.url);
    client.on('error', () => undefined);
    admin.on('error', () => undefined);
    try {
      const { sink, adapter, deadLetters } = sinkFor(
        rpush('tandem:events'),
        'tandem:offsets',
        {
          maxRecords: 10_000,
          maxAgeMs: 60_000,
          idleMs: 60_000,
          retry: { baseDelayMs: 50, maxDelayMs: 200, maxAttempts: 50 },
        },
        client,
      );
      const outcomes: string[] = [];
      sink.on('retry', (e) => {
        const details = (e.error as { details?: { outcome?: string } }).details;
        outcomes.push(details?.outcome ?? 'none');
      });
      // Source: Redis documentation, CLIENT PAUSE: in WRITE mode the server holds the scripts
      // (EVAL) of every client until the pause ends, then runs them.
      await admin.call('CLIENT', 'PAUSE', '1000', 'WRITE');
      for (let seq = 0; seq < 3000; seq++) await sink.write({ seq, dock: 'dock-1' }, meta(seq));
      await sink.flush();
      await sink.close();
      expect(outcomes.length).toBeGreaterThan(0);
      expect(outcomes[0]).toBe('unknown');
      expect(deadLetters.letters).toHaveLength(0);
      expect(adapter.stats().offsetConflicts).toBeGreaterThan(0);
      const items = (await admin.lrange('tandem:events', 0, -1)).map(Number);
      expect({ count: items.length, distinct: new Set(items).size }).toEqual({ count: 3000, distinct: 3000 });
    } finally {
      client.disconnect();
      admin.disconnect();
      await server.stop();
    }
  });

  it('a record Redis refuses, or one whose mapping throws, is dead-lettered alone, and its partition’s stored offset stops at that record', async () => {
    const k = keys();
    const wrongType = `${k.data}_string`;
    await r.redis.set(wrongType, 'not a list');
    const { sink, deadLetters } = sinkFor(
      commandMapping<DockEvent>({
        name: 'dock-list',
        idempotent: false,
        // Event 301 (partition 1, offset 100) goes to a string key: WRONGTYPE. The mapping
        // throws for event 305 (partition 2, offset 101).
        commands: (e) => {
          if (e.seq === 305) throw new RangeError('no dock for event 305');
          return ['RPUSH', e.seq === 301 ? wrongType : k.data, String(e.seq)];
        },
      }),
      k.offsets,
    );
    await writeRange(sink, 0, 450); // one batch: 150 records per partition
    await sink.close();
    expect(deadLetters.letters.map((l) => l.record.seq).sort()).toEqual([301, 305]);
    const byRecord = new Map(deadLetters.letters.map((l) => [l.record.seq, (l.error as Error).message]));
    expect(byRecord.get(301)).toMatch(/WRONGTYPE/);
    expect(byRecord.get(305)).toMatch(/no dock for event 305/);
    expect((await listSeqs(k.data)).count).toBe(448);
    expect(await r.redis.hgetall(k.offsets)).toEqual({
      [`dock-writer/${TOPIC}/0`]: '150',
      [`dock-writer/${TOPIC}/1`]: '100',
      [`dock-writer/${TOPIC}/2`]: '101',
    });
  });

  it('the bridge reads the stored next offsets of its group, and another group is refused by name', async () => {
    const k = keys();
    const { sink, adapter } = sinkFor(rpush(k.data), k.offsets);
    await writeRange(sink, 0, 10); // partitions 0, 1, 2 up to offsets 3, 2, 2
    await sink.close();
    const read = (adapter as RedisAdapter<DockEvent>).storedOffsets('dock-writer', [
      { topic: TOPIC, partition: 0 },
      { topic: TOPIC, partition: 2 },
      { topic: TOPIC, partition: 7 },
    ]);
    expect(await read).toEqual([
      { topic: TOPIC, partition: 0, offset: '4' },
      { topic: TOPIC, partition: 2, offset: '3' },
    ]);
    await expect(adapter.storedOffsets('another-group', [{ topic: TOPIC, partition: 0 }])).rejects.toThrow(
      /`groupId`.*"dock-writer"/,
    );
  });
});
