// The Redis adapter with an ioredis Cluster client against a real three-node Redis Cluster
// started by this file (cluster mode cannot be switched on for the shared server): batches are
// split by node (pipelines) and by slot (transactions), and replies are still attributed to
// their records.
import { type ChildProcess, spawn } from 'node:child_process';
import { closeSync, mkdtempSync, openSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { type DeadLetter, type DeadLetterTarget, Sink } from '@spillway/core';
import { counter, hashFields, keySlot, redisAdapter } from '@spillway/redis';
import { Cluster, Redis } from 'ioredis';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import {
  freePort,
  onProcessExit,
  run,
  stopGroup,
  waitFor,
  withParentDeathSignal,
} from '../harness/process.js';

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
  const nodes: ChildProcess[] = [];
  const ports: number[] = [];
  let root: string;
  let removeHook: () => void = () => undefined;
  let cluster: Cluster;

  beforeAll(async () => {
    root = mkdtempSync(join(tmpdir(), 'spillway-redis-cluster-'));
    removeHook = onProcessExit(() => {
      for (const n of nodes)
        if (n.pid !== undefined)
          try {
            process.kill(-n.pid, 'SIGKILL');
          } catch {
            /* gone */
          }
      rmSync(root, { recursive: true, force: true });
    });
    for (let i = 0; i < 3; i++) {
      const port = await freePort();
      ports.push(port);
      const fd = openSync(join(root, `node-${port}.log`), 'a');
      const [cmd, args] = withParentDeathSignal('redis-server', [
        '--port',
        String(port),
        '--bind',
        '127.0.0.1',
        '--cluster-enabled',
        'yes',
        '--cluster-config-file',
        join(root, `nodes-${port}.conf`),
        '--save',
        '',
        '--appendonly',
        'no',
        '--dir',
        root,
      ]);
      const child = spawn(cmd, args, { detached: true, stdio: ['ignore', fd, fd] });
      closeSync(fd);
      child.unref();
      nodes.push(child);
    }
    for (const port of ports) {
      await waitFor(
        `cluster node ${port}`,
        async () => {
          const r = new Redis(port, '127.0.0.1', {
            lazyConnect: true,
            maxRetriesPerRequest: 0,
            retryStrategy: () => null,
          });
          r.on('error', () => undefined);
          try {
            await r.connect();
            return (await r.ping()) === 'PONG' ? true : undefined;
          } finally {
            r.disconnect();
          }
        },
        { timeoutMs: 15_000, intervalMs: 100 },
      );
    }
    // Source: Redis documentation, "Scale with Redis Cluster" (redis-cli --cluster create).
    await run(
      'redis-cli',
      [
        '--cluster',
        'create',
        ...ports.map((p) => `127.0.0.1:${p}`),
        '--cluster-replicas',
        '0',
        '--cluster-yes',
      ],
      { timeoutMs: 60_000 },
    );
    await waitFor(
      'cluster_state:ok on every node',
      async () => {
        for (const port of ports) {
          const r = new Redis(port, '127.0.0.1');
          try {
            if (!/cluster_state:ok/.test(await r.cluster('INFO'))) return undefined;
          } finally {
            r.disconnect();
          }
        }
        return true;
      },
      { timeoutMs: 30_000, intervalMs: 200 },
    );
    cluster = new Cluster(ports.map((port) => ({ host: '127.0.0.1', port })));
    await cluster.ping();
  });

  afterAll(async () => {
    cluster?.disconnect();
    for (const n of nodes) await stopGroup(n, 5000);
    removeHook();
    if (root) rmSync(root, { recursive: true, force: true });
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
    for (const port of ports) {
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
