import { hashFields, redisAdapter } from '@spillway/redis';
import { Redis } from 'ioredis';
import type { DockStatus } from './records.js';
import { DEFAULT_REDIS_URL, type OpenedStore, type StoreSpec } from './store-spec.js';

/** Live availability per dock as a hash under a key prefix of the cell's own. */
export async function openRedis(spec: StoreSpec, cellId: string): Promise<OpenedStore> {
  const client = new Redis(spec.url ?? DEFAULT_REDIS_URL, { lazyConnect: true, maxRetriesPerRequest: 3 });
  await client.connect();
  const info = await client.info('server');
  const version = /redis_version:(\S+)/.exec(info)?.[1];
  const prefix = `spillway-bench:${cellId}:`;
  const adapter = redisAdapter<DockStatus>({
    client,
    mapping: hashFields({
      key: (r) => `${prefix}dock:${r.dockId}`,
      fields: (r) => ({ bikes: r.bikesAvailable, free: r.docksFree, status: r.status, at: r.reportedAt }),
    }),
  });
  return {
    adapter,
    ...(version === undefined ? {} : { version: `Redis ${version}` }),
    async dispose() {
      let cursor = '0';
      do {
        const [next, keys] = await client.scan(cursor, 'MATCH', `${prefix}*`, 'COUNT', 1000);
        cursor = next;
        if (keys.length > 0) await client.unlink(...keys);
      } while (cursor !== '0');
      client.disconnect();
    },
  };
}
