import type { StoreSpec } from './store-spec.js';

const list = (v: string) =>
  v
    .split(',')
    .map((s) => s.trim())
    .filter(Boolean);

/**
 * The store behind a URL: `postgres://…` (with `mode` insert, copy or upsert), `redis://…`,
 * `kafka://host:port[,host:port]`, or the tuner's own `noop:` and `sim:<ms>` stores (to try the
 * tuner without a server). Throws a TypeError naming the URL when the scheme is not one of these.
 */
export function storeFromUrl(url: string, mode?: string): StoreSpec {
  const scheme = url.split(':')[0]?.toLowerCase();
  switch (scheme) {
    case 'postgres':
    case 'postgresql':
      return { kind: 'postgres', url, mode: mode ?? 'insert' };
    case 'redis':
    case 'rediss':
      return { kind: 'redis', url };
    case 'kafka': {
      const brokers = list(url.replace(/^kafka:\/\//i, '').replace(/\/.*$/, ''));
      if (brokers.length === 0) throw new TypeError(`Expected kafka://host:port[,host:port], got \`${url}\``);
      return { kind: 'kafka', brokers };
    }
    case 'noop':
      return { kind: 'noop' };
    case 'sim': {
      const ms = Number(url.slice(4).replace(/^\/\//, '') || '2');
      if (!Number.isFinite(ms) || ms < 0) throw new TypeError(`Expected sim:<latency ms>, got \`${url}\``);
      return { kind: 'sim', latencyMs: ms, perRecordUs: 1 };
    }
    default:
      throw new TypeError(`Expected a postgres://, redis://, kafka://, noop: or sim: URL, got \`${url}\``);
  }
}
