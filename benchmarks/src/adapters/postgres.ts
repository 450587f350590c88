// PostgreSQL adapter throughput against the raw driver, in one process and one run. For each
// mode and batch size:
// - raw:      pg (and pg-copy-streams) doing the very same batches by hand: the same statements,
//             the same transactions, written the way a careful application would write them;
// - sink:     Sink + postgresAdapter in that mode, flushing by size at the same batch size; one
//             sink (and adapter) per mode and batch size for the whole run, as a service keeps;
// - per-row:  one autocommitted INSERT per row (the baseline batching must beat), measured once
//             per repeat on a smaller row count.
// Run: npx tsc --build && node benchmarks/dist/adapters/postgres.js [--rows 100000] [--repeats 5]
//      [--sizes 100,1000,10000] [--per-row 3000] [--modes insert,copy,upsert,unnest]
//      (`unnest` is insert mode with insertForm 'unnest'; the raw side binds one JS array per column)
//      SPILLWAY_PG_URL (default postgres://postgres@127.0.0.1:5432/test); SPILLWAY_BENCH_ROWS /
//      SPILLWAY_BENCH_REPEATS set the defaults of --rows / --repeats.
// Client CPU per row (user + system of this process, over the same window as the rate: from the
// first row to the last one durable) is printed for both sides, with the ratio sink/raw of each
// pair of runs (median and range); issue 19 asks for ≤ 1.5 at batch 10,000.
// Nothing here asserts a time: it prints samples, medians, spreads and ratios.
import { randomBytes } from 'node:crypto';
import { Readable } from 'node:stream';
import { pipeline } from 'node:stream/promises';
import { parseArgs } from 'node:util';
import { Sink } from '@spillway/core';
import { type PostgresMode, postgresAdapter } from '@spillway/postgres';
import { machineInfo } from '@spillway/tuner';
import pg from 'pg';
import pgCopy from 'pg-copy-streams';
import { fmt, summary } from '../numbers.js';

interface DockStatus {
  id: number;
  dock: string;
  bikes: number;
  emptySlots: number;
  note: string | null;
}

const { values: flags } = parseArgs({
  options: {
    // 100,000 rows: ten batches of 10,000 per sample, so that a sample measures the steady flow
    // more than the filling and draining of the first and last batch.
    rows: { type: 'string', default: process.env.SPILLWAY_BENCH_ROWS ?? '100000' },
    repeats: { type: 'string', default: process.env.SPILLWAY_BENCH_REPEATS ?? '5' },
    sizes: { type: 'string', default: '100,1000,10000' },
    'per-row': { type: 'string', default: '3000' },
    modes: { type: 'string', default: 'insert,copy,upsert,unnest' },
    // One side only (`raw` or `sink`), for a process of its own: `postgres-isolated.js` runs the two
    // sides in separate processes, so that neither is billed for the other's garbage.
    side: { type: 'string', default: 'both' },
  },
});
const ROWS = Number(flags.rows);
const REPEATS = Number(flags.repeats);
const SIZES = String(flags.sizes).split(',').map(Number);
const PER_ROW = Number(flags['per-row']);
type Variant = PostgresMode | 'unnest';
const MODES = String(flags.modes).split(',') as Variant[];
type Side = 'raw' | 'sink';
if (!['both', 'raw', 'sink'].includes(flags.side))
  throw new TypeError(`Expected \`--side\` to be both, raw or sink, got \`${flags.side}\``);
const SIDES: readonly Side[] = flags.side === 'both' ? ['raw', 'sink'] : [flags.side as Side];
const URL = process.env.SPILLWAY_PG_URL ?? 'postgres://postgres@127.0.0.1:5432/test';
const SCHEMA = `spillway_bench_${randomBytes(4).toString('hex')}`;
const TABLE = 'dock_status';
const COLUMNS = ['id', 'dock', 'bikes', 'empty_slots', 'note'];
const TYPES = ['int', 'text', 'int', 'int', 'text'];
const MAX_PARAMS = 65_535;
// The adapter's default: upsert batches above this many rows go through a staging table.
const UPSERT_VIA_COPY_ABOVE = 1000;

const records: DockStatus[] = Array.from({ length: ROWS }, (_, i) => ({
  id: i + 1,
  dock: `dock-${String(i % 5000).padStart(4, '0')}`,
  bikes: i % 13,
  emptySlots: 12 - (i % 13),
  note: i % 4 === 0 ? null : `serviced by Tandem crew ${i % 31}`,
}));
const map = (r: DockStatus) => [r.id, r.dock, r.bikes, r.emptySlots, r.note];

// ------------------------------------------------------------------ the raw driver, by hand

const colList = `(${COLUMNS.join(', ')})`;
const onConflict = ` ON CONFLICT (id) DO UPDATE SET ${COLUMNS.slice(1)
  .map((c) => `${c} = EXCLUDED.${c}`)
  .join(', ')}`;
const sqlCache = new Map<string, string>();
function valuesSql(rows: number, conflict: boolean): string {
  const key = `${rows}:${conflict}`;
  let sql = sqlCache.get(key);
  if (sql === undefined) {
    const tuples: string[] = [];
    for (let r = 0, n = 1; r < rows; r++) tuples.push(`(${COLUMNS.map(() => `$${n++}`).join(',')})`);
    sql = `INSERT INTO ${TABLE} ${colList} VALUES ${tuples.join(',')}${conflict ? onConflict : ''}`;
    sqlCache.set(key, sql);
  }
  return sql;
}

function csv(rows: readonly DockStatus[]): Buffer {
  let s = '';
  const q = (v: string) => (v.includes('"') ? `"${v.replace(/"/g, '""')}"` : `"${v}"`);
  for (const r of rows)
    s += `"${r.id}",${q(r.dock)},"${r.bikes}","${r.emptySlots}",${r.note === null ? '' : q(r.note)}\n`;
  return Buffer.from(s, 'utf8');
}

async function rawInsert(
  client: pg.PoolClient,
  batch: readonly DockStatus[],
  conflict: boolean,
): Promise<void> {
  const per = Math.floor(MAX_PARAMS / COLUMNS.length);
  const many = batch.length > per;
  if (many) await client.query('BEGIN');
  for (let i = 0; i < batch.length; i += per) {
    const part = batch.slice(i, i + per);
    const values: unknown[] = [];
    for (const r of part) values.push(r.id, r.dock, r.bikes, r.emptySlots, r.note);
    await client.query(valuesSql(part.length, conflict), values);
  }
  if (many) await client.query('COMMIT');
}

async function rawCopy(client: pg.PoolClient, into: string, batch: readonly DockStatus[]): Promise<void> {
  await pipeline(
    Readable.from([csv(batch)]),
    client.query(pgCopy.from(`COPY ${into} ${colList} FROM STDIN WITH (FORMAT csv)`)),
  );
}

async function rawUpsert(client: pg.PoolClient, batch: readonly DockStatus[]): Promise<void> {
  if (batch.length <= UPSERT_VIA_COPY_ABOVE) return rawInsert(client, batch, true);
  await client.query('BEGIN');
  await client.query(
    `CREATE TEMP TABLE stage ON COMMIT DROP AS SELECT ${COLUMNS.join(', ')} FROM ${TABLE} WITH NO DATA`,
  );
  await rawCopy(client, 'stage', batch);
  await client.query(`INSERT INTO ${TABLE} ${colList} SELECT ${COLUMNS.join(', ')} FROM stage${onConflict}`);
  await client.query('COMMIT');
}

const unnestSql = `INSERT INTO ${TABLE} ${colList} SELECT * FROM unnest(${TYPES.map((t, i) => `$${i + 1}::${t}[]`).join(', ')})`;
async function rawUnnest(client: pg.PoolClient, batch: readonly DockStatus[]): Promise<void> {
  await client.query(unnestSql, [
    batch.map((r) => r.id),
    batch.map((r) => r.dock),
    batch.map((r) => r.bikes),
    batch.map((r) => r.emptySlots),
    batch.map((r) => r.note),
  ]);
}

/** Rows per second, and client CPU µs per row (user + system of this process), over one pass. */
interface Pass {
  rate: number;
  cpu: number;
}

function passSince(t0: number, cpu0: NodeJS.CpuUsage): Pass {
  const rate = records.length / ((performance.now() - t0) / 1000);
  const cpu = process.cpuUsage(cpu0);
  return { rate, cpu: (cpu.user + cpu.system) / records.length };
}

async function raw(pool: pg.Pool, mode: Variant, size: number): Promise<Pass> {
  const cpu0 = process.cpuUsage();
  const t0 = performance.now();
  for (let i = 0; i < records.length; i += size) {
    const batch = records.slice(i, i + size);
    // One checkout per batch, as the adapter does.
    const client = await pool.connect();
    try {
      if (mode === 'insert') await rawInsert(client, batch, false);
      else if (mode === 'copy') await rawCopy(client, TABLE, batch);
      else if (mode === 'unnest') await rawUnnest(client, batch);
      else await rawUpsert(client, batch);
    } finally {
      client.release();
    }
  }
  return passSince(t0, cpu0);
}

// ------------------------------------------------------------------ Spillway

// One sink, and so one adapter, per mode and batch size for the whole run, made at its first pass:
// a service keeps its sink for as long as it runs, and with it what the adapter builds once (the
// statement text for a batch size, the staging table's statements), as the raw side keeps its
// `sqlCache` across passes. A new adapter per pass charged the sink side alone for building them
// again on every pass.
const sinks = new Map<string, Sink<DockStatus>>();

function sinkFor(pool: pg.Pool, variant: Variant, size: number): Sink<DockStatus> {
  const key = `${variant}@${size}`;
  let sink = sinks.get(key);
  if (sink !== undefined) return sink;
  const mode: PostgresMode = variant === 'unnest' ? 'insert' : variant;
  const adapter = postgresAdapter<DockStatus>({
    pool,
    table: TABLE,
    columns: variant === 'unnest' ? COLUMNS.map((name, i) => ({ name, type: TYPES[i]! })) : COLUMNS,
    map,
    mode,
    ...(variant === 'unnest' ? { insertForm: 'unnest' as const } : {}),
    ...(mode === 'upsert' ? { conflict: { key: ['id'] }, upsertViaCopyAbove: UPSERT_VIA_COPY_ABOVE } : {}),
  });
  sink = new Sink(adapter, { maxRecords: size, maxBytes: 1 << 30, maxAgeMs: 60_000, idleMs: 0 });
  sinks.set(key, sink);
  return sink;
}

async function viaSink(pool: pg.Pool, variant: Variant, size: number): Promise<Pass> {
  const sink = sinkFor(pool, variant, size);
  const written0 = sink.snapshot().written;
  const cpu0 = process.cpuUsage();
  const t0 = performance.now();
  for (const r of records) if (!sink.tryWrite(r)) await sink.write(r);
  await sink.flush();
  // Measured up to the last row durable, like the raw side; the check below is not.
  const pass = passSince(t0, cpu0);
  const written = sink.snapshot().written - written0;
  if (written !== records.length) throw new Error(`sink wrote ${written} of ${records.length}`);
  return pass;
}

function pass(pool: pg.Pool, side: Side, mode: Variant, size: number): Promise<Pass> {
  return side === 'raw' ? raw(pool, mode, size) : viaSink(pool, mode, size);
}

async function perRow(pool: pg.Pool): Promise<number> {
  const sql = `INSERT INTO ${TABLE} ${colList} VALUES ($1, $2, $3, $4, $5)`;
  const client = await pool.connect();
  try {
    const t0 = performance.now();
    for (const r of records.slice(0, PER_ROW))
      await client.query(sql, [r.id, r.dock, r.bikes, r.emptySlots, r.note]);
    return PER_ROW / ((performance.now() - t0) / 1000);
  } finally {
    client.release();
  }
}

// ------------------------------------------------------------------ report

async function main(): Promise<void> {
  const setup = new pg.Client({ connectionString: URL });
  await setup.connect();
  let version: string;
  try {
    version = (await setup.query<{ v: string }>("SELECT current_setting('server_version') AS v")).rows[0]!.v;
    await setup.query(`CREATE SCHEMA ${SCHEMA}`);
  } catch (error) {
    await setup.end();
    throw error;
  }
  await setup.query(
    `CREATE TABLE ${SCHEMA}.${TABLE} (id int PRIMARY KEY, dock text NOT NULL, bikes int NOT NULL, empty_slots int NOT NULL, note text)`,
  );
  const pool = new pg.Pool({ connectionString: URL, max: 2, options: `-c search_path=${SCHEMA}` });
  pool.on('error', () => undefined);
  const truncate = () => setup.query(`TRUNCATE ${SCHEMA}.${TABLE}`);
  console.log(
    JSON.stringify({
      benchmark: 'postgres-adapter',
      machine: machineInfo({ postgresql: version }),
      rows: ROWS,
      repeats: REPEATS,
      sizes: SIZES,
      modes: MODES,
      sides: SIDES,
      perRow: PER_ROW,
      upsertViaCopyAbove: UPSERT_VIA_COPY_ABOVE,
    }),
  );
  try {
    // Warm-up: JIT, connections, plan caches; not measured. Every mode and batch size once on each
    // side, so that each size's sink has run before its first timed pass.
    for (const mode of MODES) {
      for (const size of SIZES) {
        for (const side of SIDES) {
          await truncate();
          await pass(pool, side, mode, size);
        }
      }
    }
    const samples = new Map<string, number[]>();
    const push = (k: string, v: number) => (samples.get(k) ?? samples.set(k, []).get(k)!).push(v);
    for (let rep = 0; rep < REPEATS; rep++) {
      await truncate();
      if (PER_ROW > 0) push('per-row', await perRow(pool));
      for (const mode of MODES) {
        for (const size of SIZES) {
          // Every run starts from an empty table; alternate which side goes first so that drift
          // on a shared machine does not favour one of them.
          const order = rep % 2 === 0 ? SIDES : [...SIDES].reverse();
          for (const side of order) {
            await truncate();
            const p = await pass(pool, side, mode, size);
            push(`${side}:${mode}@${size}`, p.rate);
            // Client CPU per row: less exposed to the shared machine's noise than wall time.
            push(`cpu:${side}:${mode}@${size}`, p.cpu);
          }
        }
      }
      process.stderr.write(`repeat ${rep + 1}/${REPEATS} done\n`);
    }

    if (SIDES.length === 1) {
      // One side: its own figures; the ratio is formed by whoever ran the other side.
      console.log(`\n${SIDES[0]} side alone: rows/s and client CPU µs/row, median of ${REPEATS} (range)`);
      for (const mode of MODES) {
        for (const size of SIZES) {
          const r = summary(samples.get(`${SIDES[0]}:${mode}@${size}`)!);
          const c = summary(samples.get(`cpu:${SIDES[0]}:${mode}@${size}`)!);
          console.log(
            `${mode.padEnd(6)} | ${String(size).padEnd(6)} | ${fmt(r.median).padStart(9)} (${fmt(r.min)}–${fmt(r.max)}) | ` +
              `${c.median.toFixed(2)} (${c.min.toFixed(2)}–${c.max.toFixed(2)})`,
          );
        }
      }
      console.log(JSON.stringify({ samples: Object.fromEntries(samples) }));
      return;
    }
    const one = summary(samples.get('per-row') ?? [0]);
    console.log(
      `\nrows/s (median of ${REPEATS}; ± = half the (max-min)/median spread; [a–b] = range of the sink/raw ratios of runs measured back to back)`,
    );
    console.log(
      `per-row INSERT: ${fmt(one.median)} (${fmt(one.min)}–${fmt(one.max)}, spread ${one.spreadPct.toFixed(0)}%)`,
    );
    console.log(
      'mode   | batch  | raw driver           | sink                 | sink/raw [pairs]  | median pair | sink/per-row | client CPU µs/row raw → sink | CPU sink/raw [pairs]',
    );
    for (const mode of MODES) {
      for (const size of SIZES) {
        const r = summary(samples.get(`raw:${mode}@${size}`)!);
        const s = summary(samples.get(`sink:${mode}@${size}`)!);
        const pairs = samples
          .get(`sink:${mode}@${size}`)!
          .map((v, i) => v / samples.get(`raw:${mode}@${size}`)![i]!);
        const pr = summary(pairs);
        // Client CPU per row of the sink over the raw driver's, pair by pair (run back to back).
        const cpuRaw = samples.get(`cpu:raw:${mode}@${size}`)!;
        const cpuPairs = summary(samples.get(`cpu:sink:${mode}@${size}`)!.map((v, i) => v / cpuRaw[i]!));
        console.log(
          `${mode.padEnd(6)} | ${String(size).padEnd(6)} | ${`${fmt(r.median).padStart(9)} (±${(r.spreadPct / 2).toFixed(0)}%)`.padEnd(20)} | ` +
            `${`${fmt(s.median).padStart(9)} (±${(s.spreadPct / 2).toFixed(0)}%)`.padEnd(20)} | ` +
            `${`${(s.median / r.median).toFixed(2)} [${pr.min.toFixed(2)}–${pr.max.toFixed(2)}]`.padEnd(17)} | ${pr.median.toFixed(2).padEnd(11)} | ` +
            `${`${(s.median / one.median).toFixed(1)}×`.padEnd(12)} | ` +
            `${`${summary(cpuRaw).median.toFixed(2)} → ${summary(samples.get(`cpu:sink:${mode}@${size}`)!).median.toFixed(2)}`.padEnd(28)} | ` +
            `${cpuPairs.median.toFixed(2)} [${cpuPairs.min.toFixed(2)}–${cpuPairs.max.toFixed(2)}]`,
        );
      }
    }
    console.log(JSON.stringify({ samples: Object.fromEntries(samples) }));
  } finally {
    for (const sink of sinks.values()) await sink.close();
    await pool.end();
    await setup.query(`DROP SCHEMA ${SCHEMA} CASCADE`);
    await setup.end();
  }
}

main().catch((error) => {
  console.error(error);
  process.exitCode = 1;
});
