// Consumer bridge throughput, topic → PostgreSQL (COPY mode), side by side in one run with its two
// limits:
// - source: kafkajs consuming the same topic in a fresh group and discarding every message;
// - store:  Sink + postgresAdapter (copy) writing the same rows, already decoded, from memory;
// - bridge: KafkaBridge in a fresh group decoding each message and writing it through the same
//           sink configuration, until every row is durable;
// - source-decode: the source phase, each message also decoded with the bridge's decoder.
// Each is timed from its first message (or row) to its last one seen (source) or durable (store,
// bridge), so group-join time is left out of all of them alike. The order of the phases rotates
// per repeat. Target: bridge ≥ 0.8 × min(source, store).
// Run: npx tsc --build && node benchmarks/dist/adapters/kafka-bridge.js
//      [--messages 200000] [--repeats 3] [--warmup 1] [--partitions 6] [--batch 5000] [--fetch-bytes 0]
//      [--phases source,source-decode,store,bridge] [--profile DIR]
//      SPILLWAY_KAFKA_BROKERS (required: the benchmarks start no broker; see ../kafka-broker.ts),
//      SPILLWAY_PG_URL (default postgres://postgres@127.0.0.1:5432/test).
// Nothing here asserts a time: it prints samples, medians, spreads and ratios.
// CPU budget: each phase also reports the CPU time per message of this Node process, of this run's
// PostgreSQL backends, of the PostgreSQL server's background processes and of the Kafka broker
// (read from /proc when the servers run on this machine), since all of them share the machine's
// cores: the budget shows what the cores allow, whatever the bridge does. This process's share is
// also split into its main thread and the rest (V8's collector and compiler threads, libuv's pool).
// CPU efficiency (printed per repeat, then as median, range and spread): (source + store CPU µs per
// message) / (bridge CPU µs per message), all processes of the budget counted. The bridge does the
// source's and the store's work plus decoding and its own bookkeeping, so 1.0 would be a bridge
// that costs nothing beyond its two parts; issue 19 asks for ≥ 0.9. That is the headline figure.
// source-decode (in the default run): the source phase decoding every message with the bridge
// phase's decoder (JSON.parse) and discarding it. With it the run also prints a second figure,
// labelled as such: (source-decode + store CPU) / (bridge CPU), which counts the application's
// decoding on both sides instead of against the bridge alone.
// With all four default phases it also prints the headline figure's ceiling with this decoder,
// (source + store CPU) / (source-decode + store CPU): what a bridge that cost nothing beyond its two
// parts and the decoding would reach. Where that ceiling is below 0.9, no bridge can meet the goal.
// --profile DIR writes a CPU profile (.cpuprofile) of each phase into DIR (the phase's set-up included;
// its `measured` field holds the measured stretch, { startTime, endTime } in the profile's µs).
// bridge-eos (not in the default run; `--phases bridge,bridge-eos`): the bridge phase with
// exactly-once on (the adapter's storeOffsets, the bridge's offsetStores); with both phases the run
// prints the ratio bridge-eos / bridge.
// bridge-nodecode (not in the default run; `--phases source,store,bridge,bridge-nodecode`): the bridge
// phase with a decoder that parses nothing (it looks the message's row up in memory by partition and
// offset, as the store phase has its rows): what the bridge costs beyond the source and the store,
// the application's decoding aside. With source and store the run prints that third figure,
// (source + store CPU) / (bridge-nodecode CPU), labelled as such.
import { randomBytes } from 'node:crypto';
import { mkdirSync, readdirSync, readFileSync, readlinkSync, writeFileSync } from 'node:fs';
import { Session } from 'node:inspector';
import { join } from 'node:path';
import { PerformanceObserver } from 'node:perf_hooks';
import { parseArgs } from 'node:util';
import { type RecordMeta, Sink, type SinkOptions } from '@spillway/core';
import { DecodeError, KafkaBridge, type KafkaSource } from '@spillway/kafka';
import { postgresAdapter } from '@spillway/postgres';
import { machineInfo } from '@spillway/tuner';
import { Kafka, type KafkaMessage, logLevel } from 'kafkajs';
import pg from 'pg';
import { kafkaBrokers } from '../kafka-broker.js';
import { fmt, summary } from '../numbers.js';

interface DockStatus {
  seq: number;
  dock: string;
  bikes: number;
  emptySlots: number;
}

const { values: flags } = parseArgs({
  options: {
    messages: { type: 'string', default: '200000' },
    repeats: { type: 'string', default: '3' },
    // Unmeasured rounds of every phase before the measured ones.
    warmup: { type: 'string', default: '1' },
    partitions: { type: 'string', default: '6' },
    batch: { type: 'string', default: '5000' },
    // kafkajs' maxBytesPerPartition for both consumers; 0 keeps kafkajs' default (1 MiB).
    'fetch-bytes': { type: 'string', default: '0' },
    // A subset of the phases (e.g. `bridge` to profile it); the ratio needs all three.
    phases: { type: 'string', default: 'source,source-decode,store,bridge' },
    profile: { type: 'string' },
  },
});
const PHASES = flags.phases.split(',').map((p) => p.trim()) as Phase[];
// store-meta (not in the default run): the store phase with a Kafka-like meta per row (topic,
// partition, bigint offset, ordering key, event time), which the sink tracks as it does the
// bridge's: what the sink's own per-record bookkeeping of metas costs.
type Phase =
  | 'source'
  | 'source-decode'
  | 'store'
  | 'store-meta'
  | 'bridge'
  | 'bridge-eos'
  | 'bridge-nodecode';
const ALL_PHASES: readonly Phase[] = [
  'source',
  'source-decode',
  'store',
  'store-meta',
  'bridge',
  'bridge-eos',
  'bridge-nodecode',
];
for (const p of PHASES)
  if (!ALL_PHASES.includes(p))
    throw new TypeError(`Expected \`--phases\` to list ${ALL_PHASES.join(', ')}, got \`${flags.phases}\``);
const PROFILE_DIR = flags.profile;
const MESSAGES = Number(flags.messages);
const REPEATS = Number(flags.repeats);
const WARMUP = Number(flags.warmup);
const PARTITIONS = Number(flags.partitions);
const BATCH = Number(flags.batch);
const FETCH_BYTES = Number(flags['fetch-bytes']);
const PG_URL = process.env.SPILLWAY_PG_URL ?? 'postgres://postgres@127.0.0.1:5432/test';
// SPILLWAY_KAFKA_BROKERS, or a private broker started for this run.
const broker = kafkaBrokers();
const BROKERS = broker.brokers;
const tag = randomBytes(4).toString('hex');
const TOPIC = `spillway_bench_bridge_${tag}`;
const SCHEMA = `spillway_bench_bridge_${tag}`;
const TABLE = 'dock_status';

const kafka = new Kafka({ clientId: `bench-${tag}`, brokers: BROKERS, logLevel: logLevel.NOTHING });
const consumerConfig = {
  sessionTimeout: 30_000,
  heartbeatInterval: 3000,
  maxWaitTimeInMs: 100,
  ...(FETCH_BYTES > 0 ? { maxBytesPerPartition: FETCH_BYTES } : {}),
};
// The application name finds this run's backends in pg_stat_activity (for the CPU budget); idle
// connections are kept, so that a backend's CPU time is not lost with it between phases.
const APP_NAME = `spillway-bench-${tag}`;
const pool = new pg.Pool({
  connectionString: PG_URL,
  max: 4,
  options: `-c search_path=${SCHEMA}`,
  application_name: APP_NAME,
  idleTimeoutMillis: 0,
});
pool.on('error', () => undefined);

const event = (seq: number): DockStatus => ({
  seq,
  dock: `dock-${String(seq % 5000).padStart(4, '0')}`,
  bikes: seq % 13,
  emptySlots: 12 - (seq % 13),
});
/**
 * The decoder of both the bridge and the source-decode phases, as an application would write it:
 * the value as UTF-8 text (`toString()` with no argument is UTF-8), parsed as JSON, and each field
 * checked before the record is trusted.
 */
const decode = (m: KafkaMessage): DockStatus | DecodeError => {
  if (m.value === null) return new DecodeError('dock status without a value');
  let value: unknown;
  try {
    value = JSON.parse(m.value.toString());
  } catch (error) {
    return new DecodeError('dock status is not JSON', { cause: error });
  }
  return isDockStatus(value) ? value : new DecodeError('dock status lacks seq, dock, bikes or emptySlots');
};

function isDockStatus(v: unknown): v is DockStatus {
  if (typeof v !== 'object' || v === null) return false;
  const o = v as Partial<Record<keyof DockStatus, unknown>>;
  return (
    Number.isSafeInteger(o.seq) &&
    typeof o.dock === 'string' &&
    Number.isSafeInteger(o.bikes) &&
    Number.isSafeInteger(o.emptySlots)
  );
}

function adapter(storeOffsetsFor?: string) {
  return postgresAdapter<DockStatus>({
    pool,
    table: TABLE,
    columns: ['seq', 'dock', 'bikes', 'empty_slots'],
    map: (r) => [r.seq, r.dock, r.bikes, r.emptySlots],
    mode: 'copy',
    ...(storeOffsetsFor === undefined ? {} : { storeOffsets: { group: storeOffsetsFor } }),
  });
}

function sink(a = adapter()): Sink<DockStatus> {
  // One batch in flight: with more, core's batch selection skips the keys already in flight and,
  // with six partitions in every batch, leaves mostly tiny batches (reported to the core owner).
  const options: SinkOptions<DockStatus> = {
    name: 'dock-status',
    maxRecords: BATCH,
    maxAgeMs: 500,
    concurrency: 1,
  };
  return new Sink(a, options);
}

/**
 * A promise the phase's last message resolves. Waiting on it costs nothing while the phase runs
 * (a poll every few ms would be counted as the phase's own CPU).
 */
function phaseEnd(): { done: Promise<void>; end: () => void } {
  let end = () => {};
  const done = new Promise<void>((resolve) => {
    end = resolve;
  });
  return { done, end };
}

// ---------------------------------------------------------------- CPU budget

/** Linux reports utime / stime in clock ticks; USER_HZ is 100 on every mainstream build. */
const CLOCK_TICKS = 100;

/** User + system CPU seconds of a whole process (all its threads, dead ones included), or NaN. */
function processCpuSeconds(pid: number): number {
  return statCpuSeconds(`/proc/${pid}/stat`);
}

/**
 * This process's main thread alone (its task whose id is the pid): what is left of `node` is its
 * other threads, V8's collector and compiler helpers and libuv's pool.
 */
function mainThreadCpuSeconds(): number {
  return statCpuSeconds(`/proc/self/task/${process.pid}/stat`);
}

function statCpuSeconds(path: string): number {
  try {
    const stat = readFileSync(path, 'utf8');
    // Fields after "(comm) ": state ppid … utime (14th field overall) stime (15th).
    const f = stat.slice(stat.lastIndexOf(')') + 2).split(' ');
    return (Number(f[11]) + Number(f[12])) / CLOCK_TICKS;
  } catch {
    return Number.NaN;
  }
}

function parentOf(pid: number): number | undefined {
  try {
    const stat = readFileSync(`/proc/${pid}/stat`, 'utf8');
    return Number(stat.slice(stat.lastIndexOf(')') + 2).split(' ')[1]);
  } catch {
    return undefined;
  }
}

function allPids(): number[] {
  return readdirSync('/proc')
    .filter((d) => /^\d+$/.test(d))
    .map(Number);
}

/** The pid of the process listening on 127.0.0.1:`port` (or any address), when it runs here. */
function pidListeningOn(port: number): number | undefined {
  const inodes = new Set<string>();
  for (const table of ['/proc/net/tcp', '/proc/net/tcp6']) {
    let text = '';
    try {
      text = readFileSync(table, 'utf8');
    } catch {
      continue;
    }
    for (const line of text.split('\n').slice(1)) {
      const cols = line.trim().split(/\s+/);
      const local = cols[1];
      // st 0A = LISTEN; the local address is HEXADDR:HEXPORT.
      if (!local || cols[3] !== '0A') continue;
      if (Number.parseInt(local.slice(local.lastIndexOf(':') + 1), 16) === port) inodes.add(cols[9]!);
    }
  }
  if (inodes.size === 0) return undefined;
  for (const pid of allPids()) {
    let fds: string[];
    try {
      fds = readdirSync(`/proc/${pid}/fd`);
    } catch {
      continue;
    }
    for (const fd of fds) {
      try {
        const m = /^socket:\[(\d+)\]$/.exec(readlinkSync(`/proc/${pid}/fd/${fd}`));
        if (m && inodes.has(m[1]!)) return pid;
      } catch {
        // the fd closed meanwhile
      }
    }
  }
  return undefined;
}

/** CPU µs per message of each process group that shares the machine's cores during a phase. */
interface CpuBudget {
  /** This Node process (the kafkajs consumer, the bridge, the sink and the pg client). */
  node: number;
  /** Its main thread (part of `node`; clock ticks of /proc, 10 ms each). */
  nodeMain: number;
  /** This run's PostgreSQL backends (found by application name). */
  postgres: number;
  /** The PostgreSQL server's own processes (WAL writer, checkpointer, background writer, …). */
  postgresServer: number;
  /** The Kafka broker's JVM. */
  broker: number;
  /** Wall-clock µs per message: total CPU / wall is how many cores were busy. */
  wall: number;
  /** µs per message this process spent paused for garbage collection (part of `node`). */
  gc: number;
}

/**
 * Reads the CPU time of the processes in the budget at the start and the end of a phase. Both
 * readings are synchronous (a few /proc files), so they can be taken inside a handler at the exact
 * first and last message; which backends are this run's is asked afterwards.
 */
class CpuMeter {
  private readonly postmaster: number | undefined;
  private readonly broker: number | undefined;
  private t0 = 0;
  private node0: NodeJS.CpuUsage = process.cpuUsage();
  private pg0 = new Map<number, number>();
  private broker0 = Number.NaN;
  private t1 = 0;
  private nodeUs = 0;
  private main0 = 0;
  private mainUs = 0;
  private pg1 = new Map<number, number>();
  private broker1 = Number.NaN;
  /** GC pauses of this process while measuring, ms. */
  private gcMs = 0;
  /** The measured stretch on the monotonic clock, µs (the clock of a V8 CPU profile). */
  window = { startTime: 0, endTime: 0 };

  constructor(pgPort: number, brokerPort: number | undefined) {
    this.postmaster = pidListeningOn(pgPort);
    this.broker = brokerPort === undefined ? undefined : pidListeningOn(brokerPort);
    // GC entries arrive after their pause (asynchronously): one that began inside the stretch counts.
    new PerformanceObserver((list) => {
      for (const e of list.getEntries())
        if (e.startTime >= this.t0 && e.startTime <= this.t1) this.gcMs += e.duration;
    }).observe({ entryTypes: ['gc'] });
  }

  get found(): { postgres: boolean; broker: boolean } {
    return { postgres: this.postmaster !== undefined, broker: this.broker !== undefined };
  }

  private postgresCpu(): Map<number, number> {
    const out = new Map<number, number>();
    if (this.postmaster === undefined) return out;
    for (const pid of allPids()) {
      if (pid === this.postmaster || parentOf(pid) === this.postmaster) out.set(pid, processCpuSeconds(pid));
    }
    return out;
  }

  // The /proc scan itself is left out of this process's CPU and of the wall time.
  start(): void {
    this.pg0 = this.postgresCpu();
    this.broker0 = this.broker === undefined ? Number.NaN : processCpuSeconds(this.broker);
    this.main0 = mainThreadCpuSeconds();
    this.node0 = process.cpuUsage();
    this.gcMs = 0;
    this.t1 = Number.POSITIVE_INFINITY;
    this.window.startTime = Number(process.hrtime.bigint() / 1000n);
    this.t0 = performance.now();
  }

  stop(): void {
    this.t1 = performance.now();
    this.window.endTime = Number(process.hrtime.bigint() / 1000n);
    const u = process.cpuUsage(this.node0);
    this.nodeUs = u.user + u.system;
    this.mainUs = (mainThreadCpuSeconds() - this.main0) * 1e6;
    this.broker1 = this.broker === undefined ? Number.NaN : processCpuSeconds(this.broker);
    this.pg1 = this.postgresCpu();
  }

  /** The budget per message; `ours` are this run's backend pids. */
  budget(messages: number, ours: ReadonlySet<number>): CpuBudget {
    let mine = 0;
    let server = 0;
    for (const [pid, end] of this.pg1) {
      const used = end - (this.pg0.get(pid) ?? 0);
      if (!Number.isFinite(used)) continue;
      if (ours.has(pid)) mine += used;
      else if (pid === this.postmaster || isServerProcess(pid)) server += used;
    }
    const per = (seconds: number) => (seconds * 1e6) / messages;
    return {
      node: this.nodeUs / messages,
      nodeMain: this.mainUs / messages,
      postgres: this.postmaster === undefined ? Number.NaN : per(mine),
      postgresServer: this.postmaster === undefined ? Number.NaN : per(server),
      broker: per(this.broker1 - this.broker0),
      wall: ((this.t1 - this.t0) * 1000) / messages,
      gc: (this.gcMs * 1000) / messages,
    };
  }
}

/** CPU µs per message of every process in the budget (NaN when a server is not on this machine). */
function totalCpu(b: CpuBudget): number {
  return b.node + b.postgres + b.postgresServer + b.broker;
}

/** A PostgreSQL auxiliary process, not a client backend (whose title names its client address). */
function isServerProcess(pid: number): boolean {
  try {
    const title = readFileSync(`/proc/${pid}/cmdline`, 'utf8');
    return !/\(\d+\)|\[local\]/.test(title);
  } catch {
    return false;
  }
}

async function ourBackends(client: pg.Client): Promise<Set<number>> {
  const r = await client.query<{ pid: number }>(
    'SELECT pid FROM pg_stat_activity WHERE application_name = $1',
    [APP_NAME],
  );
  return new Set(r.rows.map((row) => row.pid));
}

// ---------------------------------------------------------------- CPU profile

/** Profiles this process between start() and stop(); writes `<dir>/<name>.cpuprofile`. */
class Profiler {
  private readonly session = new Session();

  private post(method: string, params?: object): Promise<unknown> {
    return new Promise((resolve, reject) =>
      this.session.post(method, params ?? {}, (error, result) => (error ? reject(error) : resolve(result))),
    );
  }

  async start(): Promise<void> {
    this.session.connect();
    await this.post('Profiler.enable');
    await this.post('Profiler.setSamplingInterval', { interval: 200 });
    await this.post('Profiler.start');
  }

  /** `measured`: the phase's measured stretch, µs on the profile's clock, kept in the file. */
  async stop(dir: string, name: string, measured: { startTime: number; endTime: number }): Promise<string> {
    const { profile } = (await this.post('Profiler.stop')) as { profile: object };
    this.session.disconnect();
    mkdirSync(dir, { recursive: true });
    const file = join(dir, `${name}.cpuprofile`);
    writeFileSync(file, JSON.stringify({ ...profile, measured }));
    return file;
  }
}

/** kafkajs alone: the source limit; with `decoding`, each message also decoded as the bridge does. */
async function runSource(meter: CpuMeter, decoding = false): Promise<Run> {
  const consumer = kafka.consumer({
    groupId: `bench-source-${tag}-${randomBytes(3).toString('hex')}`,
    ...consumerConfig,
  });
  let seen = 0;
  let decoded = 0;
  let t0 = 0;
  let t1 = 0;
  const last = phaseEnd();
  await consumer.connect();
  await consumer.subscribe({ topics: [TOPIC], fromBeginning: true });
  await consumer.run({
    eachBatch: async ({ batch }) => {
      if (t0 === 0) {
        meter.start();
        t0 = performance.now();
      }
      if (decoding) {
        // Decoded and dropped; the count keeps the work from being optimised away.
        for (const m of batch.messages) if (!(decode(m) instanceof DecodeError)) decoded++;
      }
      seen += batch.messages.length;
      if (seen >= MESSAGES && t1 === 0) {
        t1 = performance.now();
        meter.stop();
        last.end();
      }
    },
  });
  await last.done;
  await consumer.disconnect();
  if (decoding && decoded < MESSAGES)
    throw new Error(`source-decode decoded ${decoded} messages, expected ${MESSAGES}`);
  return { rate: MESSAGES / ((t1 - t0) / 1000) };
}

interface Run {
  rate: number;
  pauses?: number;
}

/** The sink alone, from memory: the store limit. */
async function runStore(rows: DockStatus[], meter: CpuMeter, metas?: RecordMeta[]): Promise<Run> {
  const s = sink();
  meter.start();
  const t0 = performance.now();
  if (metas) {
    for (let i = 0; i < rows.length; i++)
      if (!s.tryWrite(rows[i]!, metas[i])) await s.write(rows[i]!, metas[i]);
  } else for (const r of rows) if (!s.tryWrite(r)) await s.write(r);
  await s.flush();
  const t1 = performance.now();
  meter.stop();
  await s.close();
  return { rate: MESSAGES / ((t1 - t0) / 1000) };
}

async function runBridge(
  meter: CpuMeter,
  exactlyOnce = false,
  decoder: (m: KafkaMessage, source: KafkaSource) => DockStatus | DecodeError = decode,
): Promise<Run> {
  const groupId = `bench-bridge-${tag}-${randomBytes(3).toString('hex')}`;
  const a = adapter(exactlyOnce ? groupId : undefined);
  const s = sink(a);
  let t0 = 0;
  const bridge = new KafkaBridge<DockStatus>({
    kafka,
    groupId,
    ...(exactlyOnce ? { offsetStores: [{ sink: s, store: a }] } : {}),
    consumerConfig,
    topics: [TOPIC],
    fromBeginning: true,
    decode: (m, source) => {
      if (t0 === 0) {
        meter.start();
        t0 = performance.now();
      }
      return decoder(m, source);
    },
    route: () => s,
    deadLetter: { write: async () => undefined },
  });
  // Counted from events: snapshot() summarises histograms and is too costly to poll.
  let written = 0;
  let t1 = 0;
  const last = phaseEnd();
  s.on('written', (e) => {
    written += e.records;
    if (written >= MESSAGES && t1 === 0) {
      t1 = performance.now();
      meter.stop();
      last.end();
    }
  });
  await bridge.start();
  await last.done;
  const pauses = bridge.snapshot().pauses;
  await bridge.stop({ timeoutMs: 20_000 });
  await s.close();
  return { rate: MESSAGES / ((t1 - t0) / 1000), pauses };
}

async function main(): Promise<void> {
  const admin = kafka.admin();
  await admin.connect();
  const setup = new pg.Client({ connectionString: PG_URL });
  await setup.connect();
  const versionSql = "SELECT current_setting('server_version') AS v";
  const version = (await setup.query<{ v: string }>(versionSql)).rows[0]!.v;
  await setup.query(`CREATE SCHEMA ${SCHEMA}`);
  await setup.query(
    `CREATE TABLE ${SCHEMA}.${TABLE} (seq bigint NOT NULL, dock text NOT NULL, bikes int NOT NULL, empty_slots int NOT NULL)`,
  );
  try {
    await admin.createTopics({
      topics: [{ topic: TOPIC, numPartitions: PARTITIONS, replicationFactor: 1 }],
      waitForLeaders: true,
    });
    const producer = kafka.producer({ allowAutoTopicCreation: false });
    await producer.connect();
    const rows: DockStatus[] = [];
    for (let start = 0; start < MESSAGES; start += 10_000) {
      const messages = [];
      for (let seq = start; seq < Math.min(MESSAGES, start + 10_000); seq++) {
        const e = event(seq);
        rows.push(e);
        messages.push({ partition: seq % PARTITIONS, value: JSON.stringify(e) });
      }
      await producer.send({ topic: TOPIC, acks: -1, messages });
    }
    await producer.disconnect();
    console.log(
      JSON.stringify({
        benchmark: 'kafka-bridge',
        machine: machineInfo({ postgresql: version, kafka: broker.version }),
        messages: MESSAGES,
        repeats: REPEATS,
        warmup: WARMUP,
        partitions: PARTITIONS,
        batch: BATCH,
        fetchBytesPerPartition: FETCH_BYTES || 'kafkajs default',
        mode: 'copy',
      }),
    );

    const pgPort = Number(new URL(PG_URL).port || 5432);
    const brokerPort = BROKERS.length === 1 ? Number(BROKERS[0]!.split(':').pop()) : undefined;
    const meter = new CpuMeter(pgPort, brokerPort);
    const found = meter.found;
    if (!found.postgres || !found.broker)
      console.log(
        `CPU budget: ${found.postgres ? '' : 'PostgreSQL '}${found.broker ? '' : 'Kafka broker '}not found on this machine (reported as NaN)`,
      );
    const samples: Record<Phase | 'ratio', number[]> = {
      source: [],
      'source-decode': [],
      store: [],
      'store-meta': [],
      bridge: [],
      'bridge-eos': [],
      'bridge-nodecode': [],
      ratio: [],
    };
    const budgets: Record<Phase, CpuBudget[]> = {
      source: [],
      'source-decode': [],
      store: [],
      'store-meta': [],
      bridge: [],
      'bridge-eos': [],
      'bridge-nodecode': [],
    };
    const eosRatios: number[] = [];
    // (source + store CPU per message) / (bridge CPU per message), all processes, per repeat.
    const efficiency: number[] = [];
    // The second figure: (source-decode + store CPU per message) / (bridge CPU per message).
    const efficiencyDecoded: number[] = [];
    // The third figure: (source + store CPU per message) / (bridge-nodecode CPU per message).
    const efficiencyNoDecode: number[] = [];
    // The headline figure's ceiling with this decoder: (source + store) / (source-decode + store), what
    // a bridge costing nothing beyond its two parts and the decoding would reach.
    const efficiencyCeiling: number[] = [];
    // bridge-nodecode's decoder: the row produced at this partition and offset (each partition of the
    // fresh topic holds the rows with seq % PARTITIONS === partition, in seq order). The look-up is
    // not free (the offset string made a number, a row read from memory): the bridge is charged it.
    const lookUp = (m: KafkaMessage, source: KafkaSource): DockStatus | DecodeError => {
      const row = rows[Number(m.offset) * PARTITIONS + source.partition];
      return row !== undefined && row.seq % PARTITIONS === source.partition
        ? row
        : new DecodeError(`no row produced at partition ${source.partition}, offset ${m.offset}`);
    };
    // Metas as the bridge makes them, built before the phase like the rows (offsets per partition).
    const metas: RecordMeta[] = PHASES.includes('store-meta')
      ? rows.map((r) => {
          const partition = r.seq % PARTITIONS;
          return {
            topic: TOPIC,
            partition,
            offset: BigInt(Math.floor(r.seq / PARTITIONS)),
            key: `${TOPIC}:${partition}`,
            eventTime: Date.now(),
          };
        })
      : [];
    const runPhase = (which: Phase): Promise<Run> =>
      which === 'source' || which === 'source-decode'
        ? runSource(meter, which === 'source-decode')
        : which === 'store'
          ? runStore(rows, meter)
          : which === 'store-meta'
            ? runStore(rows, meter, metas)
            : which === 'bridge-nodecode'
              ? runBridge(meter, false, lookUp)
              : runBridge(meter, which === 'bridge-eos');
    // Unmeasured rounds first: JIT, connections, and the kafkajs protocol modules a phase loads on
    // first use (the bridge's first commit loads the commit request's) are paid once, by nobody.
    for (let w = 0; w < WARMUP; w++) {
      for (const which of PHASES) {
        await setup.query(`TRUNCATE ${SCHEMA}.${TABLE}`);
        await runPhase(which);
      }
    }
    for (let rep = 0; rep < REPEATS; rep++) {
      const round: Partial<Record<Phase, Run>> = {};
      const parts: string[] = [];
      for (let k = 0; k < PHASES.length; k++) {
        const which = PHASES[(k + rep) % PHASES.length]!;
        await setup.query(`TRUNCATE ${SCHEMA}.${TABLE}`);
        const profiler = PROFILE_DIR === undefined ? undefined : new Profiler();
        await profiler?.start();
        const run = await runPhase(which);
        if (profiler && PROFILE_DIR !== undefined) {
          const file = await profiler.stop(PROFILE_DIR, `${which}-${tag}-${rep + 1}`, meter.window);
          console.log(`CPU profile of ${which} phase ${rep + 1}: ${file}`);
        }
        if (which === 'bridge' || which === 'bridge-eos' || which === 'bridge-nodecode') {
          const n = Number(
            (await setup.query<{ n: string }>(`SELECT count(*) AS n FROM ${SCHEMA}.${TABLE}`)).rows[0]!.n,
          );
          if (n !== MESSAGES) throw new Error(`bridge run wrote ${n} rows, expected ${MESSAGES}`);
        }
        round[which] = run;
        samples[which].push(run.rate);
        const b = meter.budget(MESSAGES, await ourBackends(setup));
        budgets[which].push(b);
        parts.push(
          `${which} ${Math.round(run.rate)}/s${run.pauses === undefined ? '' : ` (${run.pauses} partition pauses)`} ` +
            `[CPU µs/msg node ${b.node.toFixed(2)} (GC pauses ${b.gc.toFixed(2)}), pg ${b.postgres.toFixed(2)}, pg-server ${b.postgresServer.toFixed(2)}, broker ${b.broker.toFixed(2)}; wall ${b.wall.toFixed(2)}]`,
        );
      }
      const { source, store, bridge } = round;
      let ratio = '';
      const eos = round['bridge-eos'];
      if (bridge && eos) {
        eosRatios.push(eos.rate / bridge.rate);
        ratio += `; bridge-eos / bridge = ${(eos.rate / bridge.rate).toFixed(2)}`;
      }
      if (source && store && bridge) {
        const r = bridge.rate / Math.min(source.rate, store.rate);
        samples.ratio.push(r);
        ratio += `; bridge / min = ${r.toFixed(2)}`;
        const [bs, bt, bb] = [budgets.source, budgets.store, budgets.bridge].map((b) => totalCpu(b.at(-1)!));
        const e = (bs! + bt!) / bb!;
        efficiency.push(e);
        ratio += `; CPU efficiency = ${e.toFixed(2)}`;
      }
      if (round['source-decode'] && store && bridge) {
        const [bd, bt, bb] = [budgets['source-decode'], budgets.store, budgets.bridge].map((b) =>
          totalCpu(b.at(-1)!),
        );
        const e = (bd! + bt!) / bb!;
        efficiencyDecoded.push(e);
        ratio += ` (decoding counted in the source phase: ${e.toFixed(2)})`;
        if (source) {
          const c = (totalCpu(budgets.source.at(-1)!) + bt!) / (bd! + bt!);
          efficiencyCeiling.push(c);
          ratio += `; ceiling with this decoder: ${c.toFixed(2)}`;
        }
      }
      if (source && store && round['bridge-nodecode']) {
        const [bs, bt, bn] = [budgets.source, budgets.store, budgets['bridge-nodecode']].map((b) =>
          totalCpu(b.at(-1)!),
        );
        const e = (bs! + bt!) / bn!;
        efficiencyNoDecode.push(e);
        ratio += `; without decoding: ${e.toFixed(2)}`;
      }
      console.log(`repeat ${rep + 1}: ${parts.join(', ')}${ratio}`);
    }
    console.log(`\nmessages/s, median of ${REPEATS} (range; spread = (max-min)/median)`);
    for (const k of PHASES) {
      const s = summary(samples[k]);
      console.log(
        `${k.padEnd(15)} ${fmt(s.median).padStart(9)}  (${fmt(s.min)}–${fmt(s.max)}, spread ${s.spreadPct.toFixed(0)}%)`,
      );
    }
    console.log(
      '\nCPU budget, µs per message, median (range) — node = this process; pg = its PostgreSQL backends;\n' +
        'pg-server = PostgreSQL auxiliary processes (machine-wide); broker = the Kafka JVM; busy = CPU / wall, in cores;\n' +
        'node main = its main thread (part of node; the rest is its helper threads: the collector, the compiler, libuv);\n' +
        'node GC = this process paused for garbage collection (wall µs per message, part of node)',
    );
    const cores = machineInfo().cores;
    const med = (xs: number[]) => summary(xs).median;
    const cell = (xs: number[]) => {
      const s = summary(xs);
      return `${s.median.toFixed(2)} (${s.min.toFixed(2)}–${s.max.toFixed(2)})`.padEnd(20);
    };
    console.log(
      `${'phase'.padEnd(15)} ${['node', 'node main', 'node GC', 'pg', 'pg-server', 'broker', 'total', 'wall'].map((h) => h.padEnd(20)).join('')}busy`,
    );
    for (const k of PHASES) {
      const bs = budgets[k];
      const total = bs.map(totalCpu);
      console.log(
        `${k.padEnd(15)} ${cell(bs.map((b) => b.node))}${cell(bs.map((b) => b.nodeMain))}${cell(bs.map((b) => b.gc))}${cell(bs.map((b) => b.postgres))}${cell(bs.map((b) => b.postgresServer))}` +
          `${cell(bs.map((b) => b.broker))}${cell(total)}${cell(bs.map((b) => b.wall))}${med(bs.map((b, i) => total[i]! / b.wall)).toFixed(2)}`,
      );
    }
    if (budgets.bridge.length > 0) {
      const node = med(budgets.bridge.map((b) => b.node));
      const total = med(budgets.bridge.map(totalCpu));
      console.log(
        `bridge ceilings from its own CPU: this process on one core ${fmt(1e6 / node)} msg/s (its GC threads can exceed it a little); ${cores} cores shared by all ${fmt((cores * 1e6) / total)} msg/s`,
      );
    }
    if (eosRatios.length > 0) {
      const r = summary(eosRatios);
      const cpu = (k: Phase) => med(budgets[k].map(totalCpu));
      console.log(
        `exactly-once / at-least-once, msg/s: median ${r.median.toFixed(2)} (range ${r.min.toFixed(2)}–${r.max.toFixed(2)}); ` +
          `CPU µs/msg, all processes: ${cpu('bridge-eos').toFixed(2)} vs ${cpu('bridge').toFixed(2)}; ` +
          `this process: ${med(budgets['bridge-eos'].map((b) => b.node)).toFixed(2)} vs ${med(budgets.bridge.map((b) => b.node)).toFixed(2)}`,
      );
    }
    if (samples.ratio.length > 0) {
      const r = summary(samples.ratio);
      const s = budgets.source;
      const t = budgets.store;
      // What the bridge must do at least: the source's and the store's work, in one Node thread.
      const floorNode = med(s.map((b) => b.node)) + med(t.map((b) => b.node));
      const floorAll =
        floorNode + med(s.map((b) => b.broker)) + med(t.map((b) => b.postgres + b.postgresServer));
      const target = 0.8 * Math.min(med(samples.source), med(samples.store));
      console.log(
        `source + store work alone (no decode, no bridge): node ${floorNode.toFixed(2)} µs/msg → at most ${fmt(1e6 / floorNode)} msg/s on one thread; ` +
          `all processes ${floorAll.toFixed(2)} µs/msg → at most ${fmt((cores * 1e6) / floorAll)} msg/s on ${cores} cores; target 0.8 × min = ${fmt(target)} msg/s`,
      );
      console.log(
        `bridge / min(source, store): median ${r.median.toFixed(2)} (range ${r.min.toFixed(2)}–${r.max.toFixed(2)}); target ≥ 0.80`,
      );
      const e = summary(efficiency);
      console.log(
        `bridge CPU efficiency = (source + store CPU µs/msg) / (bridge CPU µs/msg), all processes, per repeat: ` +
          `median ${e.median.toFixed(2)} (range ${e.min.toFixed(2)}–${e.max.toFixed(2)}, spread ${e.spreadPct.toFixed(0)}%, ${efficiency.length} repeats); target ≥ 0.90`,
      );
    }
    if (efficiencyDecoded.length > 0) {
      const e = summary(efficiencyDecoded);
      const decodeUs =
        med(budgets['source-decode'].map((b) => b.node)) - med(budgets.source.map((b) => b.node));
      console.log(
        `second figure, not the issue's metric — decoding counted in the source phase: (source-decode + store CPU µs/msg) / (bridge CPU µs/msg), all processes, per repeat: ` +
          `median ${e.median.toFixed(2)} (range ${e.min.toFixed(2)}–${e.max.toFixed(2)}, ${efficiencyDecoded.length} repeats); the decoder alone: ${decodeUs.toFixed(2)} µs/msg (source-decode less source, this process, medians)`,
      );
    }
    if (efficiencyCeiling.length > 0) {
      const e = summary(efficiencyCeiling);
      console.log(
        `ceiling of the CPU efficiency with this decoder — a bridge costing nothing beyond the source, the store and the decoding: ` +
          `(source + store CPU µs/msg) / (source-decode + store CPU µs/msg), all processes, per repeat: ` +
          `median ${e.median.toFixed(2)} (range ${e.min.toFixed(2)}–${e.max.toFixed(2)}, ${efficiencyCeiling.length} repeats)`,
      );
    }
    if (efficiencyNoDecode.length > 0) {
      const e = summary(efficiencyNoDecode);
      console.log(
        `third figure, not the issue's metric — the bridge without decoding: (source + store CPU µs/msg) / (bridge-nodecode CPU µs/msg), all processes, per repeat: ` +
          `median ${e.median.toFixed(2)} (range ${e.min.toFixed(2)}–${e.max.toFixed(2)}, ${efficiencyNoDecode.length} repeats)`,
      );
    }
    console.log(
      JSON.stringify({
        samples,
        cpuEfficiency: efficiency,
        cpuEfficiencyDecodingInSource: efficiencyDecoded,
        cpuEfficiencyWithoutDecoding: efficiencyNoDecode,
        cpuEfficiencyCeiling: efficiencyCeiling,
        cpuBudgetUsPerMessage: budgets,
      }),
    );
  } finally {
    await admin.deleteTopics({ topics: [TOPIC] }).catch(() => undefined);
    await admin.disconnect();
    await setup.query(`DROP SCHEMA ${SCHEMA} CASCADE`).catch(() => undefined);
    await setup.end();
    await pool.end();
  }
}

await main();
