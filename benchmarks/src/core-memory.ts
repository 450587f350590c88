/**
 * Memory against the configured bound: a producer writes Tandem Bikes trip records as fast as it
 * can into a PostgreSQL sink (insert mode; each record is sized by the adapter's estimate at
 * accept and mapped when its batch is written) whose store is held to about 1/100 of the producer's rate, so the sink sits at its
 * `maxPendingBytes` bound for the whole window. Beside it, a plain bounded queue does the same
 * work: the same records, the same size estimates, the same byte bound and the same slow store.
 *
 * Reported per bound (4, 64, 256 MiB by default), each run in a fresh process:
 * - live heap ÷ bound: heapUsed after a forced collection, taken once a second (`--seconds`
 *   readings) once the pending bytes first reach 80 % of the bound, less the heap before the run;
 *   the largest reading counts;
 * - peak heapUsed ÷ bound: the largest heapUsed seen (sampled every 1,000 records and every 10 ms),
 *   less the same baseline;
 * - that every record landed exactly once (row count and distinct ids in the table).
 * Goal (issue 20): live ≤ 1.2 × bound + 20 MB, peak ≤ 2 × bound + 20 MB.
 *
 * The sink's bound counts each pending record as its estimated bytes plus `recordOverheadBytes`
 * (`--overhead` sets it; its default otherwise), and "the bound is reached" is read the same way;
 * the plain queue counts estimated bytes only.
 *
 * Why PostgreSQL and not a slow fake store: whatever the real adapter keeps per pending record
 * (a prepared row, when it had a `prepare()`) is part of what the bound has to cover. The store is slowed by a wait before each
 * batch's real INSERT (calibrated from the producer's rate into a no-op sink); once the window
 * closes the wait is lifted and the sink drains at the server's own speed.
 *
 *   node --expose-gc benchmarks/dist/core-memory.js [--bounds 4,64,256] [--seconds 15] [--repeats 3] [--slowdown 100]
 *     [--kinds sink,plain] [--overhead <recordOverheadBytes of the sink; its default when absent>]
 *   SPILLWAY_PG_URL=postgres://postgres@127.0.0.1:5432/test (the default)
 */
import { execFileSync } from 'node:child_process';
import { cpus, totalmem } from 'node:os';
import { fileURLToPath } from 'node:url';
import { getHeapStatistics } from 'node:v8';
import { type Batch, Sink, type SinkAdapter } from '@spillway/core';
import { postgresAdapter } from '@spillway/postgres';
import pg from 'pg';
import { summary } from './numbers.js';

const MiB = 2 ** 20;
const MB = 1e6;
const BATCH = 1000;
const TABLE = 'bench_memory_trips';

interface Trip {
  tripId: string;
  bikeId: number;
  fromDock: string;
  toDock: string;
  startedAt: string;
  endedAt: string;
  distanceM: number;
  riderNote: string;
}

const NOTES = [
  'Saddle loose after the hill on Quay Street; rider asked for a check at the next service round. ',
  'Front light flickers in rain. Dock screen showed the bike as charged while the gauge read low. ',
  'Smooth ride along the river path, returned to a full dock and waited for a free slot nearby.  ',
];

/**
 * Trip `i`, parsed from its JSON line as a producer reading a source would have it: every string
 * its own flat copy (a note built with `repeat()` would share one string between records).
 */
function trip(i: number): Trip {
  const start = Date.UTC(2026, 5, 1) + i * 1000;
  const note = NOTES[i % 3]!;
  // Four notes of ~95 characters: the row is about 520 bytes on the wire.
  return JSON.parse(
    `{"tripId":"TR-${i}","bikeId":${(i % 9000) + 1},"fromDock":"DK-${String(i % 4000).padStart(4, '0')}",` +
      `"toDock":"DK-${String((i * 7) % 4000).padStart(4, '0')}","startedAt":"${new Date(start).toISOString()}",` +
      `"endedAt":"${new Date(start + 600_000 + (i % 1200) * 1000).toISOString()}","distanceM":${800 + (i % 5000)},` +
      `"riderNote":"${note}${note}${note}${note}"}`,
  ) as Trip;
}

const COLUMNS = [
  'trip_id',
  'bike_id',
  'from_dock',
  'to_dock',
  'started_at',
  'ended_at',
  'distance_m',
  'rider_note',
];
const map = (t: Trip) => [
  t.tripId,
  t.bikeId,
  t.fromDock,
  t.toDock,
  t.startedAt,
  t.endedAt,
  t.distanceM,
  t.riderNote,
];

const arg = (name: string, fallback: string): string => {
  const i = process.argv.indexOf(`--${name}`);
  return i >= 0 ? process.argv[i + 1]! : fallback;
};

/** Waits of the slow store; lifting the slowness ends them at once. */
const waits = new Set<() => void>();
function slowWait(ms: number): Promise<void> {
  return new Promise<void>((resolve) => {
    const done = () => {
      clearTimeout(t);
      waits.delete(done);
      resolve();
    };
    const t = setTimeout(done, ms);
    waits.add(done);
  });
}

/** The real adapter behind a wait of `delayMs` per batch while `slow` is on. */
function slowStore(pool: pg.Pool, table: string, delay: () => number) {
  const inner = postgresAdapter<Trip>({ pool, table, columns: COLUMNS, map });
  const state = { slow: true };
  const adapter: SinkAdapter<Trip> = {
    kind: 'postgres',
    estimateBytes: (r) => inner.estimateBytes(r),
    classify: (e) => inner.classify(e),
    write: async (b) => {
      if (state.slow) await slowWait(delay());
      return inner.write(b);
    },
  };
  return { adapter, state };
}

/**
 * The plain bounded queue: records and their estimated sizes in two arrays, a byte count against
 * the bound, one consumer writing batches of BATCH in order. What anyone would write by hand.
 */
class PlainQueue {
  private records: Trip[] = [];
  private sizes: number[] = [];
  private bytes = 0;
  get pendingBytes(): number {
    return this.bytes;
  }
  private room: (() => void) | undefined;
  private wake: (() => void) | undefined;
  private ended = false;
  readonly done: Promise<void>;

  constructor(
    private readonly adapter: SinkAdapter<Trip>,
    private readonly bound: number,
  ) {
    this.done = this.consume();
  }

  async push(r: Trip): Promise<void> {
    const size = this.adapter.estimateBytes!(r);
    while (this.bytes > 0 && this.bytes + size > this.bound)
      await new Promise<void>((resolve) => (this.room = resolve));
    this.records.push(r);
    this.sizes.push(size);
    this.bytes += size;
    if (this.wake) {
      const w = this.wake;
      this.wake = undefined;
      w();
    }
  }

  end(): void {
    this.ended = true;
    this.wake?.();
  }

  private async consume(): Promise<void> {
    for (;;) {
      if (this.records.length === 0) {
        if (this.ended) return;
        await new Promise<void>((resolve) => (this.wake = resolve));
        continue;
      }
      const records = this.records.splice(0, BATCH);
      const sizes = this.sizes.splice(0, BATCH);
      let bytes = 0;
      for (const s of sizes) bytes += s;
      const batch: Batch<Trip> = { id: 0, reason: 'size', attempt: 1, records, metas: [], bytes };
      await this.adapter.write(batch);
      this.bytes -= bytes;
      if (this.room) {
        const r = this.room;
        this.room = undefined;
        r();
      }
    }
  }
}

interface Sample {
  live: number;
  peak: number;
  records: number;
  landed: number;
  distinct: number;
  maxPending: number;
  /** Heap bytes per pending record, from the largest live reading. */
  perRecord: number;
  /** Estimated bytes per pending record at that reading (the overhead not included). */
  estimatedPerRecord: number;
}

async function child(kind: 'sink' | 'plain', boundMiB: number): Promise<Sample> {
  const gc = (globalThis as { gc?: () => void }).gc;
  if (!gc) throw new Error('run with node --expose-gc');
  const seconds = Number(arg('seconds', '15'));
  const slowdown = Number(arg('slowdown', '100'));
  const bound = boundMiB * MiB;
  const pool = new pg.Pool({
    connectionString: process.env.SPILLWAY_PG_URL ?? 'postgres://postgres@127.0.0.1:5432/test',
    max: 2,
  });
  // Each run writes into a table of its own.
  const table = `${TABLE}_${process.pid}`;
  await pool.query(`DROP TABLE IF EXISTS ${table}`);
  await pool.query(
    `CREATE UNLOGGED TABLE ${table} (trip_id text, bike_id int, from_dock text, to_dock text, started_at timestamptz, ended_at timestamptz, distance_m int, rider_note text)`,
  );
  let delayMs = 0;
  const { adapter, state } = slowStore(pool, table, () => delayMs);

  // Calibration: the producer's rate into a no-op sink with the same adapter's size estimate.
  const calSink = new Sink<Trip>(
    { ...adapter, write: async () => {} },
    { maxRecords: BATCH, maxAgeMs: 1000, idleMs: 0 },
  );
  // One second to warm up, the next one measured.
  let c = 0;
  let c0 = performance.now();
  while (performance.now() - c0 < 1000) for (let k = 0; k < 1000; k++) await calSink.write(trip(c++));
  const warm = c;
  c0 = performance.now();
  while (performance.now() - c0 < 1000) for (let k = 0; k < 1000; k++) await calSink.write(trip(c++));
  const producerRate = (c - warm) / ((performance.now() - c0) / 1000);
  await calSink.close();
  delayMs = (BATCH / (producerRate / slowdown)) * 1000;

  gc();
  gc();
  const base = process.memoryUsage().heapUsed;
  let peak = 0;
  const look = () => {
    const h = getHeapStatistics().used_heap_size;
    if (h > peak) peak = h;
  };
  const ticker = setInterval(look, 10);
  let live = 0;
  let liveAt = 0;
  let pendingAtLive = 0;
  let estimatedAtLive = 0;
  let maxPending = 0;

  let write: (r: Trip) => Promise<void>;
  let pending: () => number;
  let pendingBytes: () => number;
  let estimated: () => number;
  let finish: () => Promise<void>;
  if (kind === 'sink') {
    const overhead = arg('overhead', '');
    const sink = new Sink<Trip>(adapter, {
      maxRecords: BATCH,
      maxBytes: Math.min(bound, 2 * MiB),
      maxPendingBytes: bound,
      maxPendingRecords: 1e9,
      maxAgeMs: 1000,
      idleMs: 0,
      ...(overhead === '' ? {} : { recordOverheadBytes: Number(overhead) }),
    });
    write = (r) => sink.write(r);
    pending = () => sink.counters().pendingRecords;
    // What the bound counts: estimated bytes plus the per-record overhead.
    pendingBytes = () => {
      const c = sink.counters();
      return c.pendingBytes + c.pendingRecords * sink.options.recordOverheadBytes;
    };
    estimated = () => sink.counters().pendingBytes;
    // Draining a 256 MiB backlog through INSERT on a loaded machine takes minutes.
    finish = () => sink.close({ timeoutMs: 900_000 });
  } else {
    const q = new PlainQueue(adapter, bound);
    let pushed = 0;
    let written = 0;
    const w = adapter.write;
    adapter.write = async (b) => {
      const out = await w(b);
      written += b.records.length;
      return out;
    };
    write = (r) => {
      pushed++;
      return q.push(r);
    };
    pending = () => pushed - written;
    pendingBytes = () => q.pendingBytes;
    estimated = pendingBytes;
    finish = async () => {
      q.end();
      await q.done;
    };
  }

  // Forced collections once a second, once the bound has been reached (the producer waits on it).
  let full = false;
  const reader = setInterval(() => {
    if (!full) return;
    gc();
    const h = process.memoryUsage().heapUsed - base;
    const p = pending();
    if (p > maxPending) maxPending = p;
    if (h > live) {
      live = h;
      pendingAtLive = p;
      estimatedAtLive = estimated();
    }
    liveAt++;
  }, 1000);

  let n = 0;
  const t0 = performance.now();
  for (;;) {
    for (let k = 0; k < 1000; k++) {
      await write(trip(n++));
      // Reached: a batch of 1,000 leaving frees ~12 % of the smallest bound.
      if (!full && k % 100 === 0 && pendingBytes() >= 0.8 * bound) full = true;
    }
    look();
    const now = performance.now();
    // The readings run only while the producer waits for room: count them, not the clock.
    if (full && liveAt >= seconds) break;
    if (now - t0 > 600_000) throw new Error('the bound was not reached within 600 s');
  }
  clearInterval(reader);
  clearInterval(ticker);
  state.slow = false;
  for (const end of [...waits]) end();
  await finish();
  const { rows } = await pool.query(
    `SELECT count(*)::int AS n, count(DISTINCT trip_id)::int AS d FROM ${table}`,
  );
  await pool.query(`DROP TABLE ${table}`);
  await pool.end();
  if (liveAt === 0) throw new Error('no live reading: raise --seconds');
  return {
    live,
    peak: peak - base,
    records: n,
    landed: rows[0].n,
    distinct: rows[0].d,
    maxPending,
    perRecord: pendingAtLive > 0 ? live / pendingAtLive : Number.NaN,
    estimatedPerRecord: pendingAtLive > 0 ? estimatedAtLive / pendingAtLive : Number.NaN,
  };
}

async function main(): Promise<void> {
  const variant = arg('variant', '');
  if (variant) {
    const [kind, mib] = variant.split(':');
    process.stdout.write(JSON.stringify(await child(kind as 'sink' | 'plain', Number(mib))));
    return;
  }
  const bounds = arg('bounds', '4,64,256').split(',').map(Number);
  const repeats = Number(arg('repeats', '3'));
  const self = fileURLToPath(import.meta.url);
  const run = (v: string): Sample =>
    JSON.parse(
      execFileSync(
        process.execPath,
        ['--expose-gc', '--max-old-space-size=4096', self, '--variant', v, ...process.argv.slice(2)],
        { encoding: 'utf8', maxBuffer: 2 ** 20 },
      ),
    );
  console.log(
    `# memory against the bound — ${cpus()[0]?.model ?? 'unknown CPU'}, ${cpus().length} cores, ${(totalmem() / 2 ** 30).toFixed(0)} GiB, Node ${process.version}`,
  );
  console.log(
    `PostgreSQL insert sink, store slowed to 1/${arg('slowdown', '100')} of the producer, ${arg('seconds', '15')} s window, ${repeats} runs per cell (fresh process each)`,
  );
  const overhead = arg('overhead', '');
  console.log(
    `the sink's bound counts estimated bytes + ${overhead === '' ? 'the default recordOverheadBytes' : `recordOverheadBytes ${overhead}`} per pending record; the plain queue's, estimated bytes only`,
  );
  console.log(
    'bound    kind    live ÷ bound: median (min–max)   peak ÷ bound: median (min–max)   live B / estimated B per pending record   landed exactly once   goal met',
  );
  let allOnce = true;
  for (const mib of bounds) {
    const bound = mib * MiB;
    for (const kind of arg('kinds', 'sink,plain').split(',') as Array<'sink' | 'plain'>) {
      const xs: Sample[] = [];
      for (let r = 0; r < repeats; r++) xs.push(run(`${kind}:${mib}`));
      const live = summary(xs.map((x) => x.live / bound));
      const peak = summary(xs.map((x) => x.peak / bound));
      const per = summary(xs.map((x) => x.perRecord));
      const est = summary(xs.map((x) => x.estimatedPerRecord));
      const once = xs.every((x) => x.landed === x.records && x.distinct === x.records);
      allOnce &&= once;
      // Goal of issue 20: live ≤ 1.2 × bound + 20 MB and peak ≤ 2 × bound + 20 MB (medians).
      const met =
        live.median * bound <= 1.2 * bound + 20 * MB && peak.median * bound <= 2 * bound + 20 * MB
          ? 'yes'
          : 'no';
      const cell = (s: ReturnType<typeof summary>) =>
        `${s.median.toFixed(2)} (${s.min.toFixed(2)}–${s.max.toFixed(2)})`.padEnd(33);
      console.log(
        `${`${mib} MiB`.padEnd(9)}${kind.padEnd(8)}${cell(live)}${cell(peak)}${`${per.median.toFixed(0)} / ${est.median.toFixed(0)}`.padStart(12)}                              ${once ? 'yes' : 'NO'} (${xs.map((x) => x.records).join(', ')})   ${met}`,
      );
    }
  }
  if (!allOnce) process.exitCode = 1;
}

await main();
