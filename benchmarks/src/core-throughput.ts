/**
 * Core engine throughput: records/s through a no-op adapter with `write()` and with the
 * `tryWrite()` fast path, against a minimal hand-written array batcher of the same batch size
 * (the limit: what the engine costs over doing nothing but batching). Also heap bytes per
 * buffered record, and what a Kafka-like meta per record costs the engine (`tryWriteMany()` with
 * and without metas). Every sample runs in a fresh process; results are medians with spread.
 * A sample feeds one instance (batcher or sink) `--warmup` records first, then times `--records`
 * more through the same instance: the steady state of a long-running sink, where V8 has optimised
 * the engine's code once (until 2026-12-03 a sample timed a second, new instance after 20,000
 * warm-up records: V8 compiled and re-optimised ~40 engine functions inside that window).
 *
 *   node benchmarks/dist/core-throughput.js [--records 2000000] [--warmup 2000000] [--batch 1000] [--repeats 5]
 *   node --expose-gc benchmarks/dist/core-throughput.js --variant estimating3   # one sample of one variant
 */
import { execFileSync } from 'node:child_process';
import { cpus, totalmem } from 'node:os';
import { fileURLToPath } from 'node:url';
import { type RecordMeta, Sink, type SinkAdapter } from '@spillway/core';

interface Dock {
  dockId: number;
  bikes: number;
  docks: number;
  at: number;
}

const arg = (name: string, fallback: number) => {
  const i = process.argv.indexOf(`--${name}`);
  return i >= 0
    ? Number(process.argv[i + 1])
    : Number(process.env[`BENCH_${name.toUpperCase()}`] ?? fallback);
};
const variantArg = () => {
  const i = process.argv.indexOf('--variant');
  return i >= 0 ? process.argv[i + 1] : undefined;
};

const noop: SinkAdapter<Dock> = { kind: 'noop', write: async () => {}, classify: () => 'fatal' };

function record(i: number): Dock {
  return { dockId: i % 500, bikes: i % 17, docks: 20, at: i };
}

/**
 * The limit: the array batcher people write by hand — `await add(record)` pushes into an array and
 * hands each full array to the same no-op write. Same calling convention as `sink.write()`, but
 * size-only, no age bound, no backpressure, no metrics.
 */
class ArrayBatcher {
  private buf: Dock[] = [];
  constructor(
    private readonly size: number,
    private readonly adapter: SinkAdapter<Dock>,
  ) {}
  async add(r: Dock): Promise<void> {
    this.buf.push(r);
    if (this.buf.length >= this.size) await this.flush();
  }
  async flush(): Promise<void> {
    const records = this.buf;
    this.buf = [];
    if (records.length > 0)
      await this.adapter.write({ id: 0, reason: 'size', attempt: 1, records, metas: [], bytes: 0 });
  }
}

/**
 * One variant for a whole sample: a single batcher or sink, fed the warm-up records and then the
 * measured ones, as a service keeps one sink for as long as it runs. (Each stretch on a new
 * instance measured the instance's set-up too: V8 optimised the engine's per-batch code, and
 * re-optimised its per-record code for the new instance, inside the timed window.)
 */
interface Runner {
  /** Hands over records `from` … `from + count − 1`, each as the variant does, in order. */
  feed(from: number, count: number): Promise<void>;
  /** Writes what is still buffered and waits for it: the end of a timed stretch. */
  flush(): Promise<void>;
  close(): Promise<void>;
}

function arrayBatcher(batch: number): Runner {
  const b = new ArrayBatcher(batch, noop);
  return {
    async feed(from, count) {
      for (let i = from; i < from + count; i++) await b.add(record(i));
    },
    flush: () => b.flush(),
    close: async () => {},
  };
}

/** For scale: a synchronous push loop that awaits only once per batch (no per-record promise). */
function pushLoop(batch: number): Runner {
  let buf: Dock[] = [];
  const write = async () => {
    const records = buf;
    buf = [];
    if (records.length > 0)
      await noop.write({ id: 0, reason: 'size', attempt: 1, records, metas: [], bytes: 0 });
  };
  return {
    async feed(from, count) {
      for (let i = from; i < from + count; i++) {
        buf.push(record(i));
        if (buf.length >= batch) await write();
      }
    },
    flush: write,
    close: async () => {},
  };
}

function sinkRunner(
  batch: number,
  feed: (sink: Sink<Dock>, from: number, count: number) => Promise<void>,
): Runner {
  const sink = new Sink(noop, { maxRecords: batch, maxAgeMs: 500, idleMs: 0 });
  return {
    feed: (from, count) => feed(sink, from, count),
    flush: () => sink.flush(),
    close: () => sink.close(),
  };
}

function sinkWrite(batch: number): Runner {
  return sinkRunner(batch, async (sink, from, count) => {
    for (let i = from; i < from + count; i++) await sink.write(record(i));
  });
}

function sinkTryWrite(batch: number): Runner {
  return sinkRunner(batch, async (sink, from, count) => {
    for (let i = from; i < from + count; i++) {
      const r = record(i);
      if (!sink.tryWrite(r)) await sink.write(r);
    }
  });
}

/** Hands `chunk` (with `metas` beside it, if any) to the sink, waiting for room when it is full. */
async function writeChunk(sink: Sink<Dock>, chunk: Dock[], metas?: RecordMeta[]): Promise<void> {
  let taken = sink.tryWriteMany(chunk, metas);
  while (taken < chunk.length) {
    await sink.write(chunk[taken]!, metas?.[taken]);
    taken++;
    taken += sink.tryWriteMany(chunk.slice(taken), metas?.slice(taken));
  }
}

/** The fast path for hot loops that already hold records in chunks (a fetched page, a parsed block). */
function sinkTryWriteMany(batch: number): Runner {
  const chunk: Dock[] = [];
  return sinkRunner(batch, async (sink, from, count) => {
    for (let i = from; i < from + count; i++) {
      chunk.push(record(i));
      if (chunk.length === 100 || i === from + count - 1) {
        await writeChunk(sink, chunk);
        chunk.length = 0;
      }
    }
  });
}

/**
 * Metas as a Kafka consumer hands them over (topic, partition, decimal offset string, event time,
 * the partition's ordering key, progress kept by the source): chunks of 100 records, one partition
 * per chunk over six partitions. The metas come from a pool built before the run, so that only the
 * engine's work on them is measured, not making them (a meta is opaque to a no-op adapter).
 */
const META_PARTITIONS = 6;
const META_CHUNK = 100;
function metaPool(): RecordMeta[][] {
  const now = Date.now();
  return Array.from({ length: META_PARTITIONS }, (_, partition) =>
    Array.from({ length: META_CHUNK }, (_, i) => ({
      topic: 'tandem.dock-status',
      partition,
      offset: String(i),
      eventTime: now,
      key: `tandem.dock-status:${partition}`,
      externalProgress: true,
    })),
  );
}

/** `tryWriteMany()` as in sinkTryWriteMany, each record with its meta. */
function sinkTryWriteManyMetas(batch: number): Runner {
  const pool = metaPool();
  const chunk: Dock[] = [];
  let chunks = 0;
  return sinkRunner(batch, async (sink, from, count) => {
    for (let i = from; i < from + count; i++) {
      chunk.push(record(i));
      if (chunk.length === META_CHUNK || i === from + count - 1) {
        await writeChunk(sink, chunk, pool[chunks++ % META_PARTITIONS]!);
        chunk.length = 0;
      }
    }
  });
}

/** A no-op adapter with its own size estimator, as the store adapters have one. */
class EstimatingNoop implements SinkAdapter<Dock> {
  readonly kind = 'noop';
  constructor(private readonly overhead: number) {}
  async write(): Promise<void> {}
  classify(): 'fatal' {
    return 'fatal';
  }
  estimateBytes(r: Dock): number {
    return this.overhead + (r.at > 0xffff ? 40 : 36);
  }
}

/**
 * `tryWrite()` into `count` sinks in one process, each over its own estimating adapter, in turns
 * of one batch each: a service writing to several tables. Not in the default rounds; name it with
 * `--variant` (or `core-instructions.js --variants estimating1,estimating3`) to compare one sink
 * with three.
 */
function estimatingSinks(count: number): (batch: number) => Runner {
  return (batch) => {
    const sinks = Array.from(
      { length: count },
      (_, k) => new Sink(new EstimatingNoop(k), { maxRecords: batch, maxAgeMs: 500, idleMs: 0 }),
    );
    return {
      async feed(from, n) {
        for (let i = from; i < from + n; i++) {
          const sink = sinks[Math.floor(i / batch) % count]!;
          const r = record(i);
          if (!sink.tryWrite(r)) await sink.write(r);
        }
      },
      flush: async () => {
        for (const sink of sinks) await sink.flush();
      },
      close: async () => {
        for (const sink of sinks) await sink.close();
      },
    };
  };
}

/** Heap bytes each buffered record costs: the sink's entry on top of the record itself. */
function heapPerRecord(kind: 'sink' | 'array', n: number): number {
  const gc = (globalThis as { gc?: () => void }).gc;
  if (!gc) return Number.NaN;
  const records = Array.from({ length: n }, (_, i) => record(i));
  gc();
  const before = process.memoryUsage().heapUsed;
  let keep: unknown;
  if (kind === 'sink') {
    const sink = new Sink(noop, {
      maxRecords: n + 1,
      maxPendingRecords: n + 1,
      maxBytes: 2 ** 40,
      maxPendingBytes: 2 ** 50,
      maxAgeMs: 3_600_000,
      idleMs: 0,
    });
    for (const r of records) sink.tryWrite(r);
    keep = sink;
  } else {
    const arr: Dock[] = [];
    for (const r of records) arr.push(r);
    keep = arr;
  }
  gc();
  const after = process.memoryUsage().heapUsed;
  // Both stay reachable until after the second reading: otherwise the collector may free the
  // source array in between, and a plain array would seem to cost less than nothing.
  if (keep === records) throw new Error('unreachable');
  // A sink holding records keeps the process alive until they are written (up to maxAgeMs): let
  // them go now so the sample's process ends.
  if (keep instanceof Sink) void keep.flush();
  return (after - before) / n;
}

async function child(variant: string): Promise<void> {
  const n = arg('records', 2_000_000);
  const batch = arg('batch', 1000);
  const warmup = arg('warmup', 2_000_000);
  if (variant.startsWith('heap-')) {
    process.stdout.write(
      JSON.stringify({ bytes: heapPerRecord(variant === 'heap-sink' ? 'sink' : 'array', 200_000) }),
    );
    return;
  }
  const make = {
    array: arrayBatcher,
    push: pushLoop,
    write: sinkWrite,
    tryWrite: sinkTryWrite,
    tryWriteMany: sinkTryWriteMany,
    tryWriteManyMetas: sinkTryWriteManyMetas,
    estimating1: estimatingSinks(1),
    estimating3: estimatingSinks(3),
  }[variant as 'array'];
  if (make === undefined) throw new TypeError(`Unknown --variant \`${variant}\``);
  const runner = make(batch);
  // The warm-up goes through the same instance as the measured records, long enough for the
  // engine's per-batch code (called once per batch) to be optimised before the window opens.
  await runner.feed(0, warmup);
  await runner.flush();
  const c0 = process.cpuUsage();
  const t0 = process.hrtime.bigint();
  await runner.feed(warmup, n);
  await runner.flush();
  const s = Number(process.hrtime.bigint() - t0) / 1e9;
  const c = process.cpuUsage(c0);
  await runner.close();
  // CPU time (user + system, all threads: the collector's helpers included) is what the shared
  // machine's load disturbs least; wall-clock throughput is printed beside it.
  const cpuS = (c.user + c.system) / 1e6;
  process.stdout.write(JSON.stringify({ rps: n / s, nsPerRecord: (cpuS * 1e9) / n }));
}

function median(xs: number[]): number {
  const s = [...xs].sort((a, b) => a - b);
  const m = s.length >> 1;
  return s.length % 2 ? s[m]! : (s[m - 1]! + s[m]!) / 2;
}

async function main(): Promise<void> {
  const v = variantArg();
  if (v) return child(v);
  const repeats = arg('repeats', 5);
  const self = fileURLToPath(import.meta.url);
  const sample = (variant: string) =>
    JSON.parse(
      execFileSync(process.execPath, ['--expose-gc', self, '--variant', variant, ...process.argv.slice(2)], {
        encoding: 'utf8',
      }),
    );
  const variants = ['array', 'push', 'write', 'tryWrite', 'tryWriteMany', 'tryWriteManyMetas'];
  const rps: Record<string, number[]> = Object.fromEntries(variants.map((k) => [k, []]));
  const cpuNs: Record<string, number[]> = Object.fromEntries(variants.map((k) => [k, []]));
  // Ratios of CPU time to the limit, per round: each round runs every variant back to back.
  const cpuRatio: Record<string, number[]> = Object.fromEntries(variants.map((k) => [k, []]));
  // What a meta costs the engine per record, per round: tryWriteMany with metas less without.
  const metaNs: number[] = [];
  // Interleave variants so machine noise hits them alike.
  for (let r = 0; r < repeats; r++) {
    for (const k of Object.keys(rps)) {
      const x = sample(k);
      rps[k]!.push(x.rps);
      cpuNs[k]!.push(x.nsPerRecord);
    }
    for (const k of Object.keys(rps)) cpuRatio[k]!.push(cpuNs.array![r]! / cpuNs[k]![r]!);
    metaNs.push(cpuNs.tryWriteManyMetas![r]! - cpuNs.tryWriteMany![r]!);
  }
  const heapSink = sample('heap-sink').bytes as number;
  const heapArray = sample('heap-array').bytes as number;

  const cpu = cpus()[0]?.model ?? 'unknown CPU';
  console.log(
    `# core throughput — ${cpu}, ${cpus().length} cores, ${(totalmem() / 2 ** 30).toFixed(0)} GiB, Node ${process.version}`,
  );
  console.log(
    `records per sample: ${arg('records', 2_000_000)} after ${arg('warmup', 2_000_000)} warm-up records through the same instance, batch: ${arg('batch', 1000)}, samples: ${repeats} per variant (fresh process each)`,
  );
  const limit = median(rps.array!);
  console.log('variant            median rec/s   min–max rec/s            ratio to limit');
  for (const [k, xs] of Object.entries(rps)) {
    const m = median(xs);
    console.log(
      `${k.padEnd(18)} ${Math.round(m).toLocaleString('en').padStart(12)}   ${Math.round(Math.min(...xs)).toLocaleString('en')}–${Math.round(Math.max(...xs)).toLocaleString('en')}`.padEnd(
        62,
      ) + (m / limit).toFixed(2),
    );
  }
  const range = (xs: number[]) => `${Math.min(...xs).toFixed(2)}–${Math.max(...xs).toFixed(2)}`;
  console.log(
    'variant            median CPU ns/record   min–max        CPU ratio to limit: median (min–max of rounds)',
  );
  for (const [k, xs] of Object.entries(cpuNs)) {
    const cpu = `${k.padEnd(18)} ${median(xs).toFixed(0).padStart(10)}            ${Math.min(...xs).toFixed(0)}–${Math.max(...xs).toFixed(0)}`;
    console.log(`${cpu.padEnd(57)}${median(cpuRatio[k]!).toFixed(2)} (${range(cpuRatio[k]!)})`);
  }
  console.log(
    `a Kafka-like meta per record costs the engine ${median(metaNs).toFixed(0)} ns CPU (median of rounds; range ${Math.min(...metaNs).toFixed(0)}–${Math.max(...metaNs).toFixed(0)}): tryWriteManyMetas less tryWriteMany`,
  );
  console.log(
    `heap per buffered record: sink ${heapSink.toFixed(0)} B, plain array ${heapArray.toFixed(0)} B (engine overhead ${(heapSink - heapArray).toFixed(0)} B)`,
  );
  console.log(
    `goals (CPU ratio, median of rounds): write() ≥ 0.5 → ${median(cpuRatio.write!).toFixed(2)}; ` +
      `tryWriteMany() ≥ 0.6 → ${median(cpuRatio.tryWriteMany!).toFixed(2)}; ` +
      `engine heap ≤ 64 B per buffered record → ${(heapSink - heapArray).toFixed(0)} B`,
  );
}

await main();
