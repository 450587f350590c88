// Redis adapter throughput against the raw driver, in one process and one run:
// - raw:        ioredis pipelines of the same HSET commands, one pipeline per batch;
// - sink:       Sink + redisAdapter(hashFields), flushing by size at the same batch size;
// - per-record: one awaited HSET per record (the baseline batching must beat).
// Run: npx tsc --build && node benchmarks/dist/adapters/redis.js [--records 100000] [--repeats 5]
//      [--sizes 100,1000,10000] [--per-record 5000]; SPILLWAY_REDIS_URL (default redis://127.0.0.1:6379).
// Nothing here asserts a time: it prints samples, medians, spreads and ratios.

import { randomBytes } from 'node:crypto';
import { parseArgs } from 'node:util';
import { Sink } from '@spillway/core';
import { hashFields, redisAdapter } from '@spillway/redis';
import { machineInfo } from '@spillway/tuner';
import { Redis } from 'ioredis';
import { fmt, summary } from '../numbers.js';

interface DockStatus {
  dock: string;
  bikes: number;
  free: number;
  district: string;
}

const { values: flags } = parseArgs({
  options: {
    records: { type: 'string', default: process.env.SPILLWAY_BENCH_RECORDS ?? '100000' },
    repeats: { type: 'string', default: process.env.SPILLWAY_BENCH_REPEATS ?? '5' },
    sizes: { type: 'string', default: '100,1000,10000' },
    'per-record': { type: 'string', default: '5000' },
  },
});
const RECORDS = Number(flags.records);
const REPEATS = Number(flags.repeats);
const SIZES = String(flags.sizes).split(',').map(Number);
const PER_RECORD = Number(flags['per-record']);
const URL = process.env.SPILLWAY_REDIS_URL ?? 'redis://127.0.0.1:6379';
const prefix = `spw:bench:${randomBytes(4).toString('hex')}:`;

const records: DockStatus[] = Array.from({ length: RECORDS }, (_, i) => ({
  dock: `dock-${i % 5000}`,
  bikes: i % 13,
  free: 12 - (i % 13),
  district: `d${i % 7}`,
}));
const mapping = hashFields<DockStatus>({
  key: (r) => `${prefix}${r.dock}`,
  fields: (r) => ({ bikes: r.bikes, free: r.free, district: r.district }),
});

async function raw(client: Redis, batch: number): Promise<number> {
  const t0 = performance.now();
  for (let i = 0; i < records.length; i += batch) {
    const p = client.pipeline();
    for (const r of records.slice(i, i + batch))
      p.hset(`${prefix}${r.dock}`, 'bikes', r.bikes, 'free', r.free, 'district', r.district);
    const replies = await p.exec();
    for (const [err] of replies ?? []) if (err) throw err;
  }
  return records.length / ((performance.now() - t0) / 1000);
}

async function viaSink(client: Redis, batch: number, concurrency = 1): Promise<number> {
  const sink = new Sink(redisAdapter({ client, mapping }), {
    maxRecords: batch,
    maxBytes: 1 << 30,
    maxAgeMs: 60_000,
    idleMs: 0,
    concurrency,
  });
  const t0 = performance.now();
  for (const r of records) if (!sink.tryWrite(r)) await sink.write(r);
  await sink.flush();
  const rate = records.length / ((performance.now() - t0) / 1000);
  await sink.close();
  if (sink.snapshot().written !== records.length)
    throw new Error(`sink wrote ${sink.snapshot().written} of ${records.length}`);
  return rate;
}

async function perRecord(client: Redis): Promise<number> {
  const t0 = performance.now();
  for (const r of records.slice(0, PER_RECORD))
    await client.hset(`${prefix}${r.dock}`, 'bikes', r.bikes, 'free', r.free, 'district', r.district);
  return PER_RECORD / ((performance.now() - t0) / 1000);
}

async function main(): Promise<void> {
  const client = new Redis(URL);
  const version = String((await client.info('server')).match(/redis_version:(\S+)/)?.[1]);
  console.log(
    JSON.stringify({
      benchmark: 'redis-adapter',
      machine: machineInfo({ redis: version }),
      records: RECORDS,
      repeats: REPEATS,
      sizes: SIZES,
      perRecord: PER_RECORD,
    }),
  );
  // Warm-up: JIT and connection, not measured.
  await raw(client, 1000);
  await viaSink(client, 1000);
  const samples = new Map<string, number[]>();
  const push = (k: string, v: number) => (samples.get(k) ?? samples.set(k, []).get(k)!).push(v);
  for (let rep = 0; rep < REPEATS; rep++) {
    push('per-record', await perRecord(client));
    for (const size of SIZES) {
      // Alternate which goes first so drift on a shared machine does not favour one side.
      if (rep % 2 === 0) {
        push(`raw@${size}`, await raw(client, size));
        push(`sink@${size}`, await viaSink(client, size));
      } else {
        push(`sink@${size}`, await viaSink(client, size));
        push(`raw@${size}`, await raw(client, size));
      }
      // Not a like-for-like row: two pipelines in flight (Sink concurrency 2), for information.
      push(`sink-c2@${size}`, await viaSink(client, size, 2));
    }
  }
  const one = summary(samples.get('per-record')!);
  console.log(`\nrecords/s (median of ${REPEATS}; spread = (max-min)/median)`);
  console.log(
    `per-record HSET: ${fmt(one.median)} (${fmt(one.min)}–${fmt(one.max)}, spread ${one.spreadPct.toFixed(0)}%)`,
  );
  console.log(
    'batch  | raw pipeline               | sink                       | sink/raw: ratio of medians, paired median [range] | sink/per-record',
  );
  for (const size of SIZES) {
    const r = summary(samples.get(`raw@${size}`)!);
    const s = summary(samples.get(`sink@${size}`)!);
    // Ratio of medians, and the range of per-repeat ratios (pairs measured back to back).
    const pairs = samples.get(`sink@${size}`)!.map((v, i) => v / samples.get(`raw@${size}`)![i]!);
    const pr = summary(pairs);
    console.log(
      `${String(size).padEnd(6)} | ${fmt(r.median).padStart(9)} (±${(r.spreadPct / 2).toFixed(0)}%)`.padEnd(
        37,
      ) +
        ` | ${fmt(s.median).padStart(9)} (±${(s.spreadPct / 2).toFixed(0)}%)`.padEnd(29) +
        ` | ${(s.median / r.median).toFixed(2)}, paired ${pr.median.toFixed(2)} [${pr.min.toFixed(2)}–${pr.max.toFixed(2)}]` +
        ` | ${(s.median / one.median).toFixed(1)}×`,
    );
  }
  for (const size of SIZES) {
    const c2 = summary(samples.get(`sink-c2@${size}`)!);
    const r = summary(samples.get(`raw@${size}`)!);
    console.log(
      `sink, concurrency 2, batch ${size}: ${fmt(c2.median)} (±${(c2.spreadPct / 2).toFixed(0)}%) = ${(c2.median / r.median).toFixed(2)}× raw, ${(c2.median / one.median).toFixed(1)}× per-record`,
    );
  }
  console.log(JSON.stringify({ samples: Object.fromEntries(samples) }));
  // Remove the keys written here (SCAN, not KEYS).
  let cursor = '0';
  do {
    const [next, keys] = await client.scan(cursor, 'MATCH', `${prefix}*`, 'COUNT', 1000);
    cursor = next;
    if (keys.length) await client.unlink(...keys);
  } while (cursor !== '0');
  client.disconnect();
}

main().catch((error) => {
  console.error(error);
  process.exitCode = 1;
});
