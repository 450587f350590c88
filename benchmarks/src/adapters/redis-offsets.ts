// What `storeOffsets` costs in Redis: the same records (Kafka-like metas over 3 partitions, one
// RPUSH each) through the Redis adapter three ways, each sample in a fresh process, the three
// interleaved per repeat:
// - pipeline: plain pipelines (at-least-once, the baseline);
// - atomic:   one MULTI/EXEC per batch;
// - offsets:  one script per batch that also stores the offsets (`storeOffsets`, exactly-once).
// Reported per phase: records/s, client CPU µs per record, and the server's main-thread CPU µs per
// record (INFO cpu before and after; only meaningful on a server nothing else uses), as medians with
// ranges, and as ratios to the pipeline measured in the same repeat.
// Run: npx tsc --build && node benchmarks/dist/adapters/redis-offsets.js [--records 200000]
//      [--batch 1000] [--repeats 5]; SPILLWAY_REDIS_URL (default redis://127.0.0.1:6379).
// Nothing here asserts a time.

import { spawnSync } from 'node:child_process';
import { randomBytes } from 'node:crypto';
import { fileURLToPath } from 'node:url';
import { parseArgs } from 'node:util';
import { Sink } from '@spillway/core';
import { commandMapping, redisAdapter } from '@spillway/redis';
import { machineInfo } from '@spillway/tuner';
import { Redis } from 'ioredis';
import { summary } from '../numbers.js';

const PHASES = ['pipeline', 'atomic', 'offsets'] as const;
type Phase = (typeof PHASES)[number];

const { values: flags } = parseArgs({
  options: {
    records: { type: 'string', default: '200000' },
    batch: { type: 'string', default: '1000' },
    repeats: { type: 'string', default: '5' },
    phase: { type: 'string' },
  },
});
const RECORDS = Number(flags.records);
const BATCH = Number(flags.batch);
const REPEATS = Number(flags.repeats);
const URL = process.env.SPILLWAY_REDIS_URL ?? 'redis://127.0.0.1:6379';

interface Sample {
  phase: Phase;
  perSecond: number;
  clientCpuUs: number;
  serverCpuUs: number;
}

/** The server's main-thread CPU seconds so far (Redis 7 INFO cpu; older servers: the whole process). */
async function serverCpu(client: Redis): Promise<number> {
  const info = await client.info('cpu');
  const read = (name: string) => Number(info.match(new RegExp(`${name}:([\\d.]+)`))?.[1] ?? 0);
  const main = read('used_cpu_user_main_thread') + read('used_cpu_sys_main_thread');
  return main > 0 ? main : read('used_cpu_user') + read('used_cpu_sys');
}

/** One sample, in this (fresh) process. */
async function sample(phase: Phase): Promise<Sample> {
  const client = new Redis(URL);
  const prefix = `spw:bench:offsets:${randomBytes(4).toString('hex')}:`;
  const list = `${prefix}list`;
  const adapter = redisAdapter<number>({
    client,
    mapping: commandMapping<number>({ idempotent: false, commands: (seq) => ['RPUSH', list, String(seq)] }),
    ...(phase === 'atomic' ? { atomic: true } : {}),
    ...(phase === 'offsets' ? { storeOffsets: { group: 'bench', key: `${prefix}offsets` } } : {}),
  });
  const sink = new Sink(adapter, { maxRecords: BATCH, maxBytes: 1 << 30, maxAgeMs: 60_000, idleMs: 0 });
  const metas = Array.from({ length: RECORDS }, (_, seq) => ({
    topic: 'tandem.dock-events',
    partition: seq % 3,
    offset: BigInt(Math.floor(seq / 3)),
  }));
  const server0 = await serverCpu(client);
  const cpu0 = process.cpuUsage();
  const t0 = performance.now();
  for (let seq = 0; seq < RECORDS; seq++) {
    if (!sink.tryWrite(seq, metas[seq])) await sink.write(seq, metas[seq]);
  }
  await sink.flush();
  const seconds = (performance.now() - t0) / 1000;
  const cpu = process.cpuUsage(cpu0);
  const server1 = await serverCpu(client);
  await sink.close();
  const stored = await client.llen(list);
  if (stored !== RECORDS) throw new Error(`${phase}: the list holds ${stored} of ${RECORDS}`);
  await client.unlink(list, `${prefix}offsets`);
  client.disconnect();
  return {
    phase,
    perSecond: RECORDS / seconds,
    clientCpuUs: (cpu.user + cpu.system) / RECORDS,
    serverCpuUs: ((server1 - server0) * 1e6) / RECORDS,
  };
}

function runChild(phase: Phase): Sample {
  const self = fileURLToPath(import.meta.url);
  const args = [self, '--phase', phase, '--records', String(RECORDS), '--batch', String(BATCH)];
  const out = spawnSync(process.execPath, args, { encoding: 'utf8' });
  if (out.status !== 0) throw new Error(`${phase} sample failed: ${out.stderr}`);
  return JSON.parse(out.stdout.trim().split('\n').at(-1)!) as Sample;
}

async function main(): Promise<void> {
  if (flags.phase !== undefined) {
    console.log(JSON.stringify(await sample(flags.phase as Phase)));
    return;
  }
  const probe = new Redis(URL);
  const version = String((await probe.info('server')).match(/redis_version:(\S+)/)?.[1]);
  probe.disconnect();
  console.log(
    JSON.stringify({
      benchmark: 'redis-offsets',
      machine: machineInfo({ redis: version }),
      records: RECORDS,
      batch: BATCH,
      repeats: REPEATS,
    }),
  );
  runChild('offsets'); // warm-up: server script cache, page cache; not counted
  const samples: Sample[][] = [];
  for (let rep = 0; rep < REPEATS; rep++) {
    // Rotate the order so drift on a shared machine favours no phase.
    const order = PHASES.map((_, k) => PHASES[(k + rep) % PHASES.length]!);
    const got = order.map(runChild);
    samples.push(PHASES.map((p) => got.find((s) => s.phase === p)!));
  }
  const line = (name: string, xs: number[], digits: number) => {
    const s = summary(xs);
    return `${name} ${s.median.toFixed(digits)} [${s.min.toFixed(digits)}–${s.max.toFixed(digits)}]`;
  };
  console.log(
    `\nmedian [range] of ${REPEATS} samples, each in a fresh process; ratios to the pipeline of the same repeat`,
  );
  for (const [k, phase] of PHASES.entries()) {
    const own = samples.map((r) => r[k]!);
    const base = samples.map((r) => r[0]!);
    console.log(
      [
        phase.padEnd(9),
        line(
          'records/s',
          own.map((s) => s.perSecond),
          0,
        ),
        line(
          'client µs/rec',
          own.map((s) => s.clientCpuUs),
          2,
        ),
        line(
          'server µs/rec',
          own.map((s) => s.serverCpuUs),
          2,
        ),
        line(
          '| rate ratio',
          own.map((s, i) => s.perSecond / base[i]!.perSecond),
          2,
        ),
        line(
          'client cpu ratio',
          own.map((s, i) => s.clientCpuUs / base[i]!.clientCpuUs),
          2,
        ),
        line(
          'server cpu ratio',
          own.map((s, i) => s.serverCpuUs / base[i]!.serverCpuUs),
          2,
        ),
      ].join('  '),
    );
  }
  console.log(JSON.stringify({ samples }));
}

main().catch((error) => {
  console.error(error);
  process.exitCode = 1;
});
