// `storeOffsets` with an ioredis Cluster client against a real three-node Redis Cluster of its own
// (startRedisCluster; cluster mode cannot be switched on for the shared server): a sink whose keys
// all share the offsets hash's {hash tag} is exactly-once (one script on that slot's node); a sink
// whose keys spread over slots is refused before anything is sent, since a batch split across
// nodes cannot be atomic.
import { Sink, StoreError } from '@spillway/core';
import { commandMapping, hashFields, keySlot, redisAdapter } from '@spillway/redis';
import { Cluster } from 'ioredis';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { type RedisCluster, startRedisCluster } from '../harness/index.js';

const TOPIC = 'tandem.dock-events';
const meta = (seq: number) => ({ topic: TOPIC, partition: seq % 3, offset: String(Math.floor(seq / 3)) });

describe('Redis storeOffsets with a Cluster client', () => {
  let nodes: RedisCluster;
  let cluster: Cluster;

  beforeAll(async () => {
    nodes = await startRedisCluster();
    cluster = new Cluster(nodes.ports.map((port) => ({ host: '127.0.0.1', port })));
    await cluster.ping();
  });

  afterAll(async () => {
    cluster?.disconnect();
    await nodes?.stop();
  });

  it('a sink whose keys share the offsets hash’s hash tag takes each record once across a replay', async () => {
    const list = 'tandem:{dock-events}:list';
    const offsets = 'tandem:{dock-events}:offsets';
    // Source: Redis Cluster specification, "Hash tags": only the part inside {…} is hashed.
    expect(keySlot(list)).toBe(keySlot(offsets));
    const adapter = redisAdapter<number>({
      client: cluster,
      mapping: commandMapping<number>({ idempotent: false, commands: (seq) => ['RPUSH', list, String(seq)] }),
      storeOffsets: { group: 'dock-feed', key: offsets },
    });
    const sink = new Sink(adapter, { maxRecords: 200 });
    for (const [from, to] of [
      [0, 900],
      [0, 900], // a replay
      [600, 1500], // partly stored
    ] as const) {
      for (let seq = from; seq < to; seq++) await sink.write(seq, meta(seq));
      await sink.flush();
    }
    await sink.close();
    const items = (await cluster.lrange(list, 0, -1)).map(Number);
    expect({ count: items.length, distinct: new Set(items).size }).toEqual({ count: 1500, distinct: 1500 });
    expect(await cluster.hgetall(offsets)).toEqual({
      [`dock-feed/${TOPIC}/0`]: '500',
      [`dock-feed/${TOPIC}/1`]: '500',
      [`dock-feed/${TOPIC}/2`]: '500',
    });
    expect(adapter.stats().alreadyStored).toBe(900 + 300);
    expect(
      await adapter.storedOffsets('dock-feed', [
        { topic: TOPIC, partition: 0 },
        { topic: TOPIC, partition: 1 },
      ]),
    ).toEqual([
      { topic: TOPIC, partition: 0, offset: '500' },
      { topic: TOPIC, partition: 1, offset: '500' },
    ]);
  });

  it('a sink whose keys spread over slots is refused before anything is sent, and stops', async () => {
    const offsets = 'tandem:{docks}:offsets';
    const adapter = redisAdapter<number>({
      client: cluster,
      mapping: hashFields<number>({
        key: (seq) => `tandem:dock:${seq}`,
        fields: (seq) => ({ free: seq % 12 }),
      }),
      storeOffsets: { group: 'dock-feed', key: offsets },
    });
    const sink = new Sink(adapter, { maxRecords: 50 });
    const errors: unknown[] = [];
    sink.on('error', (e) => errors.push(e.error));
    for (let seq = 0; seq < 50; seq++) await sink.write(seq, meta(seq)).catch(() => undefined);
    await sink.flush().catch(() => undefined);
    await sink.close().catch(() => undefined);
    expect(sink.snapshot()).toMatchObject({ written: 0, state: 'failed' });
    const error = errors.find((e) => e instanceof StoreError) as StoreError | undefined;
    expect(error?.driverCode).toBe('CROSSSLOT');
    expect(error?.message).toMatch(/cannot be atomic/);
    // Nothing was sent: no dock hash and no offsets.
    for (const key of [offsets, 'tandem:dock:0', 'tandem:dock:1']) expect(await cluster.exists(key)).toBe(0);
  });
});
