// The Redis adapter with an ioredis Cluster client against a real three-node Redis Cluster of its
// own (startRedisCluster; cluster mode cannot be switched on for the shared server): batches are
// split by node (pipelines) and by slot (transactions), and replies are still attributed to
// their records.
import { type DeadLetter, type DeadLetterTarget, Sink } from '@spillway/core';
import { counter, hashFields, keySlot, redisAdapter } from '@spillway/redis';
import { Cluster, Redis } from 'ioredis';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { type RedisCluster, startRedisCluster } from '../harness/index.js';

interface DockStatus {
  seq: number;
  dock: string;
  free: number;
}

class CollectedDeadLetters<T> implements DeadLetterTarget<T> {
  readonly letters: DeadLetter<T>[] = [];
  async write(letters: readonly DeadLetter<T>[]): Promise<void> {
    this.letters.push(...letters);
  }
}

const dock = (seq: number): DockStatus => ({ seq, dock: `dock-${seq}`, free: seq % 12 });

describe('Redis adapter with a Cluster client', () => {
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

  it('agrees with the server on key slots', async () => {
    // Source: Redis documentation, CLUSTER KEYSLOT.
    for (const key of ['tandem:dock:1', 'tandem:{d3}:free', 'x', '']) {
      expect(keySlot(key)).toBe(Number(await cluster.cluster('KEYSLOT', key)));
    }
  });

  it('writes a batch whose keys span all three nodes, one pipeline per node', async () => {
    const deadLetters = new CollectedDeadLetters<DockStatus>();
    const sink = new Sink(
      redisAdapter<DockStatus>({
        client: cluster,
        mapping: hashFields({ key: (r) => `cl:${r.dock}`, fields: (r) => ({ free: r.free }) }),
      }),
      { maxRecords: 1000, deadLetter: deadLetters },
    );
    const n = 20_000;
    for (let i = 0; i < n; i++) await sink.write(dock(i));
    await sink.close();
    expect(deadLetters.letters).toEqual([]);
    let found = 0;
    for (let i = 0; i < n; i += 1) {
      if ((await cluster.hget(`cl:dock-${i}`, 'free')) === String(i % 12)) found++;
    }
    expect(found).toBe(n);
    // The keys really are spread: every node holds some.
    for (const port of nodes.ports) {
      const r = new Redis(port, '127.0.0.1');
      expect(await r.dbsize()).toBeGreaterThan(0);
      r.disconnect();
    }
  });

  it('dead-letters only the record whose key holds the wrong type, on whichever node', async () => {
    await cluster.rpush('wt:dock-77', 'not a hash');
    const deadLetters = new CollectedDeadLetters<DockStatus>();
    const sink = new Sink(
      redisAdapter<DockStatus>({
        client: cluster,
        mapping: hashFields({ key: (r) => `wt:${r.dock}`, fields: (r) => ({ free: r.free }) }),
      }),
      { deadLetter: deadLetters },
    );
    for (let i = 0; i < 500; i++) await sink.write(dock(i));
    await sink.close();
    expect(deadLetters.letters.map((l) => l.record.seq)).toEqual([77]);
    expect(await cluster.hget('wt:dock-78', 'free')).toBe(String(78 % 12));
  });

  it('in atomic mode runs one transaction per slot and still attributes errors', async () => {
    await cluster.set('at:{d1}:rentals', 'not a number');
    const deadLetters = new CollectedDeadLetters<DockStatus>();
    const sink = new Sink(
      redisAdapter<DockStatus>({
        client: cluster,
        atomic: true,
        mapping: counter({ key: (r) => `at:{d${r.seq % 10}}:rentals`, by: () => 1 }),
      }),
      { deadLetter: deadLetters },
    );
    for (let i = 0; i < 1000; i++) await sink.write(dock(i));
    await sink.close();
    // Every record of slot {d1} failed with "value is not an integer"; the other slots counted.
    expect(deadLetters.letters).toHaveLength(100);
    expect(deadLetters.letters.every((l) => l.record.seq % 10 === 1)).toBe(true);
    for (let d = 0; d < 10; d++) if (d !== 1) expect(await cluster.get(`at:{d${d}}:rentals`)).toBe('100');
  });
});
