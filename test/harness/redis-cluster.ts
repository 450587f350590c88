// A throwaway three-node Redis Cluster (no replicas, no persistence) on free loopback ports, for
// the tests that need cluster mode (it cannot be switched on for the shared server).
import { type ChildProcess, spawn } from 'node:child_process';
import { closeSync, mkdtempSync, openSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { Redis } from 'ioredis';
import { freePort, onProcessExit, run, stopGroup, waitFor, withParentDeathSignal } from './process.js';

export interface RedisCluster {
  /** The nodes' ports on 127.0.0.1. */
  readonly ports: readonly number[];
  /** Stops every node and removes the files. */
  stop(): Promise<void>;
}

/** Starts three cluster-enabled redis-server nodes and joins them (every slot covered). */
export async function startRedisCluster(): Promise<RedisCluster> {
  const nodes: ChildProcess[] = [];
  const ports: number[] = [];
  const root = mkdtempSync(join(tmpdir(), 'spillway-redis-cluster-'));
  const removeHook = onProcessExit(() => {
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
  return {
    ports,
    async stop() {
      for (const n of nodes) await stopGroup(n, 5000);
      removeHook();
      rmSync(root, { recursive: true, force: true });
    },
  };
}
