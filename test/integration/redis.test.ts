// The Redis adapter against real servers: 100,000 records through each ready-made mapping,
// per-record attribution of error replies inside a pipeline and a transaction, a restart of a
// private server mid-stream, unknown outcomes, and binary-safe / huge values.
import { type DeadLetter, type DeadLetterTarget, Sink, type SinkOptions } from '@spillway/core';
import {
  commandMapping,
  counter,
  hashFields,
  offsetStreamId,
  type RedisAdapterOptions,
  redisAdapter,
  sortedSetMember,
  streamEntry,
  stringValue,
} from '@spillway/redis';
import { Redis } from 'ioredis';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import {
  deleteRedisPrefix,
  type PrivateServer,
  redisPrefix,
  services,
  startPrivateRedis,
} from '../harness/index.js';

/** A Tandem Bikes dock status event. */
interface DockStatus {
  seq: number;
  dock: string;
  district: string;
  bikes: number;
  free: number;
}

const N = 100_000;

function dockStatus(seq: number): DockStatus {
  return { seq, dock: `dock-${seq}`, district: `d${seq % 7}`, bikes: seq % 13, free: 12 - (seq % 13) };
}

/** Dead letters kept in memory so a test can look at exactly which records were refused. */
class CollectedDeadLetters<T> implements DeadLetterTarget<T> {
  readonly letters: DeadLetter<T>[] = [];
  async write(letters: readonly DeadLetter<T>[]): Promise<void> {
    this.letters.push(...letters);
  }
}

function sinkFor<T>(adapter: RedisAdapterOptions<T>, options: SinkOptions<T> = {}) {
  const deadLetters = new CollectedDeadLetters<T>();
  const sink = new Sink(redisAdapter(adapter), {
    maxRecords: 1000,
    retry: { baseDelayMs: 20, maxDelayMs: 200 },
    deadLetter: deadLetters,
    ...options,
  });
  return { sink, deadLetters };
}

async function writeAll<T>(
  sink: Sink<T>,
  records: Iterable<T>,
  metaOf?: (r: T) => { partition: number; offset: number },
): Promise<void> {
  for (const r of records) await sink.write(r, metaOf?.(r));
  await sink.close({ timeoutMs: 120_000 });
}

function* range(n: number, from = 0): Generator<number> {
  for (let i = from; i < from + n; i++) yield i;
}

/** Runs `read` for every key in chunks of one pipeline each. */
async function readAll<R>(
  redis: Redis,
  keys: string[],
  read: (p: ReturnType<Redis['pipeline']>, key: string) => void,
): Promise<R[]> {
  const out: R[] = [];
  for (let i = 0; i < keys.length; i += 5000) {
    const p = redis.pipeline();
    for (const k of keys.slice(i, i + 5000)) read(p, k);
    const replies = (await p.exec()) ?? [];
    for (const [err, value] of replies) {
      if (err) throw err;
      out.push(value as R);
    }
  }
  return out;
}

describe('Redis adapter on the shared server', () => {
  let redis: Redis;
  let prefix: string;

  beforeAll(async () => {
    redis = new Redis(services().redisUrl);
    prefix = redisPrefix('rsink');
  });

  afterAll(async () => {
    await deleteRedisPrefix(redis, prefix);
    redis.disconnect();
  });

  it('writes 100,000 string values with a TTL, each exactly as mapped', async () => {
    const client = new Redis(services().redisUrl);
    const { sink, deadLetters } = sinkFor<DockStatus>({
      client,
      mapping: stringValue({
        key: (r) => `${prefix}str:${r.dock}`,
        value: (r) => `${r.bikes}/${r.free}`,
        ttlMs: 600_000,
      }),
    });
    await writeAll(
      sink,
      (function* () {
        for (const i of range(N)) yield dockStatus(i);
      })(),
    );
    const keys = [...range(N)].map((i) => `${prefix}str:dock-${i}`);
    const values = await readAll<string | null>(redis, keys, (p, k) => p.get(k));
    expect(values.filter((v, i) => v !== `${i % 13}/${12 - (i % 13)}`)).toEqual([]);
    const ttls = await readAll<number>(redis, keys, (p, k) => p.pttl(k));
    // Source: Redis documentation, PTTL (-1: no expiry, -2: no key; otherwise remaining ms).
    expect(ttls.filter((t) => !(t > 0 && t <= 600_000))).toEqual([]);
    expect(deadLetters.letters).toEqual([]);
    expect(sink.snapshot().written).toBe(N);
    client.disconnect();
  });

  it('writes 100,000 records as hash fields with an expiry on the hash', async () => {
    const client = new Redis(services().redisUrl);
    const { sink } = sinkFor<DockStatus>({
      client,
      mapping: hashFields({
        key: (r) => `${prefix}hash:${r.dock}`,
        fields: (r) => ({ bikes: r.bikes, free: r.free, district: r.district }),
        ttlMs: 600_000,
      }),
    });
    await writeAll(
      sink,
      (function* () {
        for (const i of range(N)) yield dockStatus(i);
      })(),
    );
    const keys = [...range(N)].map((i) => `${prefix}hash:dock-${i}`);
    const hashes = await readAll<Record<string, string>>(redis, keys, (p, k) => p.hgetall(k));
    const wrong = hashes.filter((h, i) => {
      const d = dockStatus(i);
      return (
        h.bikes !== String(d.bikes) ||
        h.free !== String(d.free) ||
        h.district !== d.district ||
        Object.keys(h).length !== 3
      );
    });
    expect(wrong).toEqual([]);
    const ttls = await readAll<number>(redis, keys.slice(0, 1000), (p, k) => p.pttl(k));
    expect(ttls.every((t) => t > 0)).toBe(true);
    client.disconnect();
  });

  it('writes 100,000 sorted-set members with their scores', async () => {
    const client = new Redis(services().redisUrl);
    const key = (d: string) => `${prefix}zset:${d}`;
    const { sink } = sinkFor<DockStatus>({
      client,
      mapping: sortedSetMember({
        key: (r) => key(r.district),
        member: (r) => r.dock,
        score: (r) => r.seq + 0.5,
      }),
    });
    await writeAll(
      sink,
      (function* () {
        for (const i of range(N)) yield dockStatus(i);
      })(),
    );
    let total = 0;
    for (let d = 0; d < 7; d++) {
      const flat = await redis.zrange(key(`d${d}`), '0', '-1', 'WITHSCORES');
      for (let j = 0; j < flat.length; j += 2) {
        const seq = Number(flat[j]!.slice('dock-'.length));
        expect(seq % 7).toBe(d);
        expect(Number(flat[j + 1])).toBe(seq + 0.5);
        total++;
      }
    }
    expect(total).toBe(N);
  });

  it('appends 100,000 stream entries in order, trimmed to about MAXLEN', async () => {
    const client = new Redis(services().redisUrl);
    const full = `${prefix}stream:all`;
    const trimmed = `${prefix}stream:trimmed`;
    const a = sinkFor<DockStatus>({
      client,
      mapping: streamEntry({ key: () => full, fields: (r) => ({ seq: r.seq, dock: r.dock }) }),
    });
    const b = sinkFor<DockStatus>({
      client,
      mapping: streamEntry({ key: () => trimmed, fields: (r) => ({ seq: r.seq }), maxLen: 1000 }),
    });
    for (const i of range(N)) {
      await a.sink.write(dockStatus(i));
      await b.sink.write(dockStatus(i));
    }
    await Promise.all([a.sink.close(), b.sink.close()]);
    expect(await redis.xlen(full)).toBe(N);
    let expected = 0;
    for (let start = '-'; ; ) {
      const page = await redis.xrange(full, start, '+', 'COUNT', 10_000);
      for (const [, fields] of page) {
        expect(fields).toEqual(['seq', String(expected), 'dock', `dock-${expected}`]);
        expected++;
      }
      if (page.length < 10_000) break;
      start = `(${page[page.length - 1]![0]}`;
    }
    expect(expected).toBe(N);
    // Source: Redis documentation, XADD / XTRIM: with `~` the stream keeps at least MAXLEN entries
    // and trims whole macro nodes only (the default node size, stream-node-max-entries, is 100).
    const len = await redis.xlen(trimmed);
    expect(len).toBeGreaterThanOrEqual(1000);
    expect(len).toBeLessThan(1000 + 100 + 1);
    const last = await redis.xrevrange(trimmed, '+', '-', 'COUNT', 1);
    expect(last[0]![1]).toEqual(['seq', String(N - 1)]);
    client.disconnect();
  });

  it('counts 100,000 increments with INCRBY and HINCRBY', async () => {
    const client = new Redis(services().redisUrl);
    const a = sinkFor<DockStatus>({
      client,
      mapping: counter({ key: (r) => `${prefix}rentals:${r.district}`, by: (r) => r.bikes }),
    });
    const b = sinkFor<DockStatus>({
      client,
      mapping: counter({ key: () => `${prefix}rentals:byDistrict`, field: (r) => r.district, by: () => 1 }),
    });
    for (const i of range(N)) {
      await a.sink.write(dockStatus(i));
      await b.sink.write(dockStatus(i));
    }
    await Promise.all([a.sink.close(), b.sink.close()]);
    const sums = new Map<string, number>();
    const counts = new Map<string, number>();
    for (const i of range(N)) {
      const d = dockStatus(i);
      sums.set(d.district, (sums.get(d.district) ?? 0) + d.bikes);
      counts.set(d.district, (counts.get(d.district) ?? 0) + 1);
    }
    for (const [district, sum] of sums)
      expect(Number(await redis.get(`${prefix}rentals:${district}`))).toBe(sum);
    const byDistrict = await redis.hgetall(`${prefix}rentals:byDistrict`);
    expect(Object.fromEntries([...counts].map(([k, v]) => [k, String(v)]))).toEqual(byDistrict);
    client.disconnect();
  });

  it('dead-letters exactly the record whose key holds the wrong type; the rest of the batch stands', async () => {
    const client = new Redis(services().redisUrl);
    const key = (r: DockStatus) => `${prefix}wt:${r.dock}`;
    await redis.rpush(`${prefix}wt:dock-500`, 'a list, not a hash');
    const { sink, deadLetters } = sinkFor<DockStatus>(
      { client, mapping: hashFields({ key, fields: (r) => ({ free: r.free }) }) },
      { maxRecords: 1000, idleMs: 0, maxAgeMs: 60_000 },
    );
    let batches = 0;
    sink.on('flush', () => batches++);
    for (const i of range(1000)) await sink.write(dockStatus(i));
    await sink.close();
    expect(batches).toBe(1);
    expect(deadLetters.letters.map((l) => l.record.seq)).toEqual([500]);
    // Source: Redis documentation, "Redis error replies": WRONGTYPE, "Operation against a key
    // holding the wrong kind of value".
    expect(deadLetters.letters[0]!.error).toMatchObject({
      code: 'SPILLWAY_STORE_ERROR',
      driverCode: 'WRONGTYPE',
    });
    expect(deadLetters.letters[0]!.reason).toBe('rejected');
    const others = [...range(1000)].filter((i) => i !== 500);
    const free = await readAll<string | null>(
      redis,
      others.map((i) => `${prefix}wt:dock-${i}`),
      (p, k) => p.hget(k, 'free'),
    );
    expect(free.filter((v, j) => v !== String(12 - (others[j]! % 13)))).toEqual([]);
    expect(await redis.type(`${prefix}wt:dock-500`)).toBe('list');
    client.disconnect();
  });

  it('attributes an error to its record when one record maps to several commands', async () => {
    const client = new Redis(services().redisUrl);
    // Record 7's second command (the expiry) is fine, its first (HSET on a string) is refused.
    await redis.set(`${prefix}multi:dock-7`, 'a string');
    const { sink, deadLetters } = sinkFor<DockStatus>({
      client,
      mapping: hashFields({
        key: (r) => `${prefix}multi:${r.dock}`,
        fields: (r) => ({ free: r.free }),
        ttlMs: 60_000,
      }),
    });
    await writeAll(
      sink,
      (function* () {
        for (const i of range(20)) yield dockStatus(i);
      })(),
    );
    expect(deadLetters.letters.map((l) => l.record.seq)).toEqual([7]);
    expect(await redis.hget(`${prefix}multi:dock-8`, 'free')).toBe(String(12 - 8));
    client.disconnect();
  });

  it('in atomic mode applies the rest of a transaction when one command fails while executing', async () => {
    const client = new Redis(services().redisUrl);
    await redis.rpush(`${prefix}atomic:dock-3`, 'x');
    const { sink, deadLetters } = sinkFor<DockStatus>({
      client,
      atomic: true,
      mapping: stringValue({ key: (r) => `${prefix}atomic:${r.dock}`, value: (r) => String(r.free) }),
    });
    // SET overwrites any type, so make record 3 fail with INCRBY's type check instead.
    const inc = sinkFor<DockStatus>({
      client,
      atomic: true,
      mapping: counter({ key: (r) => `${prefix}atomic:${r.dock}`, by: () => 1 }),
    });
    await writeAll(
      inc.sink,
      (function* () {
        for (const i of range(10)) yield dockStatus(i);
      })(),
    );
    // Source: Redis documentation, "Transactions": errors after EXEC do not roll back the others.
    expect(inc.deadLetters.letters.map((l) => l.record.seq)).toEqual([3]);
    expect(inc.deadLetters.letters[0]!.error).toMatchObject({ driverCode: 'WRONGTYPE' });
    expect(await redis.get(`${prefix}atomic:dock-4`)).toBe('1');
    await writeAll(sink, [dockStatus(100)]);
    expect(deadLetters.letters).toEqual([]);
    client.disconnect();
  });

  it('stops the sink on an unknown command (EXECABORT in a transaction) and reports nothing durable', async () => {
    const client = new Redis(services().redisUrl);
    const adapter = redisAdapter<DockStatus>({
      client,
      atomic: true,
      mapping: commandMapping({
        idempotent: true,
        commands: (r) => (r.seq === 2 ? ['NOSUCHCOMMAND', 'k'] : ['SET', `${prefix}abort:${r.dock}`, '1']),
      }),
    });
    const deadLetters = new CollectedDeadLetters<DockStatus>();
    const sink = new Sink(adapter, { deadLetter: deadLetters });
    const errors: unknown[] = [];
    sink.on('error', (e) => errors.push(e.error));
    for (const i of range(5)) await sink.write(dockStatus(i));
    await expect(sink.flush()).rejects.toMatchObject({ code: 'SPILLWAY_SINK_FAILED' });
    // Source: Redis documentation, "Transactions": a command refused while queueing makes EXEC
    // fail with EXECABORT and nothing is applied.
    expect(errors[0]).toMatchObject({ driverCode: 'EXECABORT' });
    expect(await redis.exists(`${prefix}abort:dock-0`, `${prefix}abort:dock-1`)).toBe(0);
    expect(sink.snapshot().written).toBe(0);
    expect(deadLetters.letters).toEqual([]);
    client.disconnect();
  });

  it('round-trips binary values with zero bytes and a 64 MiB value', async () => {
    const client = new Redis(services().redisUrl);
    const binary = Array.from({ length: 256 }, (_, i) => Buffer.from([0, i, 0, 255 - i, 0]));
    const huge = Buffer.alloc(64 * 1024 * 1024, 0);
    for (let i = 0; i < huge.length; i += 4099) huge[i] = i % 251;
    const records = [
      ...binary.map((v, i) => ({ key: Buffer.from(`${prefix}bin:\u0000${i}`), value: v })),
      { key: Buffer.from(`${prefix}bin:huge`), value: huge },
    ];
    const { sink, deadLetters } = sinkFor<{ key: Buffer; value: Buffer }>(
      { client, mapping: stringValue({ key: (r) => r.key, value: (r) => r.value }) },
      { maxBytes: 128 * 1024 * 1024 },
    );
    await writeAll(sink, records);
    expect(deadLetters.letters).toEqual([]);
    for (const r of records.slice(0, -1)) expect((await redis.getBuffer(r.key))!.equals(r.value)).toBe(true);
    const back = await redis.getBuffer(Buffer.from(`${prefix}bin:huge`));
    expect(back!.length).toBe(huge.length);
    expect(back!.equals(huge)).toBe(true);
    client.disconnect();
  });

  it('makes a stream idempotent with ids derived from source offsets: a replay adds nothing', async () => {
    const client = new Redis(services().redisUrl);
    const key = `${prefix}stream:offsets`;
    const mapping = streamEntry<DockStatus>({
      key: () => key,
      fields: (r) => ({ seq: r.seq }),
      id: offsetStreamId,
    });
    expect(mapping.idempotent).toBe(true);
    const meta = (r: DockStatus) => ({ partition: 0, offset: r.seq });
    const first = sinkFor<DockStatus>({ client, mapping });
    await writeAll(first.sink, [...range(500)].map(dockStatus), meta);
    // The source redelivers from offset 300 (a rebalance, a restart): 300..599.
    const again = sinkFor<DockStatus>({ client, mapping });
    await writeAll(again.sink, [...range(300, 300)].map(dockStatus), meta);
    expect(again.deadLetters.letters).toEqual([]);
    expect(again.sink.snapshot().written).toBe(300);
    const entries = await redis.xrange(key, '-', '+');
    expect(entries.map(([, f]) => Number(f[1]))).toEqual([...range(600)]);
    expect(entries[0]![0]).toBe('0-1');
    client.disconnect();
  });

  it('makes a counter idempotent with per-record markers: a replay counts nothing', async () => {
    const client = new Redis(services().redisUrl);
    const mapping = counter<DockStatus>({
      key: () => `${prefix}{ded}count`,
      by: () => 1,
      dedupe: { key: (_r, m) => `${prefix}{ded}seen:${m?.offset}`, ttlMs: 60_000 },
    });
    const meta = (r: DockStatus) => ({ partition: 0, offset: r.seq });
    await writeAll(sinkFor<DockStatus>({ client, mapping }).sink, [...range(1000)].map(dockStatus), meta);
    await writeAll(
      sinkFor<DockStatus>({ client, mapping }).sink,
      [...range(1000, 500)].map(dockStatus),
      meta,
    );
    expect(Number(await redis.get(`${prefix}{ded}count`))).toBe(1500);
    client.disconnect();
  });
});

describe('Redis adapter against a private server', () => {
  let server: PrivateServer;
  let redis: Redis;

  beforeAll(async () => {
    server = await startPrivateRedis();
    redis = new Redis(server.url, { maxRetriesPerRequest: null });
    redis.on('error', () => undefined);
    // The private server runs without persistence; a save point makes its SIGTERM shutdown write
    // a snapshot that the restarted server loads, so a restart keeps what was acknowledged.
    // Source: Redis documentation, "Redis persistence" / SHUTDOWN (a save point makes shutdown save).
    await redis.config('SET', 'save', '3600 1');
  });

  afterAll(async () => {
    redis?.disconnect();
    await server?.stop();
  });

  it('loses nothing when the server restarts mid-stream, and counts the retries', async () => {
    // maxRetriesPerRequest: 1 flushes queued commands after two reconnect attempts, so the outage
    // reaches the sink as errors (retried by the engine) instead of waiting inside ioredis.
    const client = new Redis(server.url, { maxRetriesPerRequest: 1 });
    client.on('error', () => undefined);
    const total = 60_000;
    const { sink, deadLetters } = sinkFor<DockStatus>(
      {
        client,
        mapping: hashFields({
          key: (r) => `restart:${r.dock}`,
          fields: (r) => ({ seq: r.seq, free: r.free }),
        }),
      },
      {
        retry: {
          maxAttempts: Number.POSITIVE_INFINITY,
          baseDelayMs: 50,
          maxDelayMs: 500,
          maxElapsedMs: 120_000,
        },
      },
    );
    let restarted: Promise<void> | undefined;
    for (const i of range(total)) {
      await sink.write(dockStatus(i));
      if (i === 20_000) restarted = server.restart({ downMs: 1500 });
    }
    await restarted;
    await sink.close({ timeoutMs: 120_000 });
    const snap = sink.snapshot();
    expect(deadLetters.letters).toEqual([]);
    expect(snap.written).toBe(total);
    expect(snap.retries).toBeGreaterThan(0);
    const seqs = await readAll<string | null>(
      redis,
      [...range(total)].map((i) => `restart:dock-${i}`),
      (p, k) => p.hget(k, 'seq'),
    );
    const missing = seqs.flatMap((v, i) => (v === String(i) ? [] : [i]));
    expect(missing).toEqual([]);
    console.log(`redis restart: ${total} records, ${snap.retries} retries, ${snap.batches} batches`);
    client.disconnect();
  });

  it('dead-letters a non-idempotent record whose outcome is unknown, and shows it ran once', async () => {
    // A script keeps the server busy for 600 ms; the client gives up after 100 ms
    // (commandTimeout), yet the server runs the INCRBY once the script ends.
    const client = new Redis(server.url, { commandTimeout: 100 });
    client.on('error', () => undefined);
    const key = 'unknown:rentals';
    const { sink, deadLetters } = sinkFor<DockStatus>({
      client,
      mapping: counter({ key: () => key, by: () => 1 }),
    });
    await client.ping(); // connected and ready: the command below is really sent
    const busy = redis.eval(
      "local t = redis.call('TIME'); local s = t[1] * 1000000 + t[2]; repeat t = redis.call('TIME') until t[1] * 1000000 + t[2] - s > 600000; return 1",
      0,
    );
    await new Promise((r) => setTimeout(r, 50));
    await writeAll(sink, [dockStatus(1)]);
    await busy;
    // Replies on one connection come in order: once PING answers, the INCRBY sent before it ran.
    await client.ping();
    expect(deadLetters.letters).toHaveLength(1);
    expect(deadLetters.letters[0]!.error).toMatchObject({ details: { outcome: 'unknown' } });
    // The command did run: the dead letter is "maybe applied", and the sink did not apply it twice.
    expect(await redis.get(key)).toBe('1');
    client.disconnect();
  });

  it('retries an unknown outcome when told to, and a non-idempotent counter then counts twice', async () => {
    const client = new Redis(server.url, { commandTimeout: 100 });
    client.on('error', () => undefined);
    const key = 'unknown:retried';
    const { sink, deadLetters } = sinkFor<DockStatus>(
      { client, onUnknownOutcome: 'retry', mapping: counter({ key: () => key, by: () => 1 }) },
      { retry: { baseDelayMs: 700, maxDelayMs: 700 } },
    );
    await client.ping(); // connected and ready: the command below is really sent
    const busy = redis.eval(
      "local t = redis.call('TIME'); local s = t[1] * 1000000 + t[2]; repeat t = redis.call('TIME') until t[1] * 1000000 + t[2] - s > 600000; return 1",
      0,
    );
    await new Promise((r) => setTimeout(r, 50));
    await writeAll(sink, [dockStatus(1)]);
    await busy;
    await client.ping();
    expect(deadLetters.letters).toEqual([]);
    expect(sink.snapshot().retries).toBeGreaterThan(0);
    // The documented hazard of 'retry' with a non-idempotent mapping.
    expect(Number(await redis.get(key))).toBeGreaterThanOrEqual(2);
    client.disconnect();
  });
});
