import { mkdir, writeFile } from 'node:fs/promises';
import { dirname, resolve } from 'node:path';
import { type Command, InvalidArgumentError, Option } from 'commander';
import { SHAPE_NAMES, type ShapeName } from '../bench/shape-names.js';
import { list, positive, shapes } from './bench.js';

interface TuneCommandOptions {
  to: string;
  p99: number;
  shape?: string[];
  rate?: number;
  duration?: number;
  mode?: 'insert' | 'copy' | 'upsert';
  json?: boolean;
  table?: string;
  key?: string[];
  sample?: string;
  timestampColumn?: string;
  headroom?: number;
  budget?: number;
  validate?: number;
  prefill?: number;
  maxConcurrency?: number;
  chart?: string;
}

const TABLE_SHAPES = [...SHAPE_NAMES, 'replay'] as const;

const shapeList = (v: string): string[] => {
  const out = list(v);
  for (const s of out)
    if (!(TABLE_SHAPES as readonly string[]).includes(s))
      throw new InvalidArgumentError(`expected shapes among ${TABLE_SHAPES.join(', ')}, got "${s}"`);
  return out;
};
const fraction = (v: string): number => {
  const n = Number(v);
  if (!Number.isFinite(n) || n < 0 || n >= 100)
    throw new InvalidArgumentError(`expected a percentage in [0, 100), got "${v}"`);
  return n / 100;
};
const wholeOrZero = (v: string): number => {
  const n = Number(v);
  if (!Number.isInteger(n) || n < 0) throw new InvalidArgumentError(`expected an integer >= 0, got "${v}"`);
  return n;
};

const EXAMPLE = `
With --table (PostgreSQL) the tuner copies your table's definition into a scratch schema
(CREATE TABLE … (LIKE … INCLUDING ALL), logged), writes your sample rows there in the mode you
will run, recommends the least store cost that meets the target with headroom, validates it, and
drops the copy at the end, on an error and on Ctrl-C. Your table is only read from the catalogs:
never written to or altered, and locked only as a SELECT would be, for the CREATE … LIKE.

Example (a real run, trimmed where marked; the README shows it whole):

  $ spillway tune --to postgres://postgres@127.0.0.1:5432/test --table tandem.dock_status --mode copy \\
      --sample dock-status.ndjson --rate 2000 --p99 250 --budget 40 --validate 10
  Scratch copy: spillway_tune_67848ed8.dock_status (dropped at the end, on an error and on Ctrl-C).
  Plan: up to 15 trials, about 37 s, then a 10 s validation run.
    [1/15 3 s] maxRecords 10 maxAgeMs 25 idleMs 25 concurrency 1: p99 52.1 ms, 1713 records/s, 172 writes/s, 546.5 µs/record
    [2/15 5 s] maxRecords 50 maxAgeMs 25 idleMs 25 concurrency 1: p99 56.5 ms, 2061 records/s, 42 writes/s, 186.9 µs/record
    …
    [15/15 33 s] maxRecords 200 maxAgeMs 125 idleMs 25 concurrency 1: p99 181.0 ms, 1945 records/s, 10 writes/s, 63.1 µs/record
    validating maxRecords 1000 maxAgeMs 125 idleMs 125 concurrency 1 for 10 s …
  Table tandem.dock_status on PostgreSQL 15.20 (Debian 15.20-0+deb12u1), copy mode.
  Measured on a scratch copy spillway_tune_67848ed8.dock_status (CREATE TABLE … (LIKE tandem.dock_status INCLUDING ALL): same columns, indexes, constraints and defaults, logged), dropped afterwards.
  Serial column(s) id draw from a sequence of the copy's own, not from yours.
  The copy lacks:
    - foreign key dock_status_station_id_fkey → tandem.stations (not checked on the copy)
    - trigger dock_status_touch_station (does not fire on the copy)
    - the table's ~250,000 existing rows (planner estimate; the copy starts empty: --prefill N fills it first)
  Records: 1,500 rows of dock-status.ndjson, cycled; columns dock_id, station_id, bikes_available, docks_free, status, reported_at.
    Sample fields not in the table (not written): firmware.
    Left to their defaults: id.
  Load: steady at 2,000 records/s, 2000 ms per trial. Target: p99 accept → durable ≤ 250 ms; with 25 % headroom a setting must reach ≤ 187.5 ms.
  Store write cost fitted over 976 writes: 6.71 ms + 41.8 µs per record.

  | maxRecords | maxAgeMs | idleMs | concurrency | p99 ms | records/s | writes/s | store µs/record | ceiling/s (est.) | meets                                         |
  |------------|----------|--------|-------------|--------|-----------|----------|-----------------|------------------|-----------------------------------------------|
  |       1000 |      125 |    125 |           1 |  148.6 |     2,005 |        8 |            53.9 |           20,617 | yes ◀                                         |
  |        200 |      125 |     25 |           1 |  181.0 |     1,945 |       10 |            63.1 |           13,270 | yes                                           |
  |       1000 |      125 |     25 |           1 |  149.6 |     2,024 |        8 |            68.2 |           20,617 | yes                                           |
  |        200 |      125 |    125 |           4 |  135.6 |     1,955 |       10 |            65.9 |           53,078 | yes                                           |
    … 11 more rows, one per setting tried

  store µs/record: time the store spent writing, per record written (the store cost). ceiling/s: estimated highest rate the setting sustains — full batches back to back on its connections at the fitted write cost (an upper bound).

  Recommended: maxRecords 1000, maxAgeMs 125, idleMs 125, concurrency 1
    p99 148.6 ms (aim ≤ 187.5 ms), 2,005 records/s, 8 writes/s, 53.9 µs of store time per record, estimated ceiling 20,617 records/s.

  Validation: 10 s at 2,000 records/s on the copy, maxRecords 1000, maxAgeMs 125, idleMs 125, concurrency 1 — the advice holds.
    p99 158.7 ms (target 250 ms) · 2,008 records/s durable (offered 2,011) · 0 stuck · 0 refused · 65.0 µs store time per record

  Options to paste:

  import { postgresSink } from '@spillway/postgres';

  // Tuned for p99 ≤ 250 ms at 2,000 records/s (steady), copy mode.
  // The pool needs at least 1 connection(s): one per batch in flight.
  const sink = postgresSink<Record<string, unknown>>({
    pool,
    schema: "tandem",
    table: "dock_status",
    columns: ["dock_id","station_id","bikes_available","docks_free","status","reported_at"],
    mode: 'copy',
    map: (r) => [r.dock_id, r.station_id, r.bikes_available, r.docks_free, r.status, r.reported_at],
    maxRecords: 1000,
    maxAgeMs: 125,
    idleMs: 125,
    concurrency: 1,
  });

  Chart: ./spillway-tune/tandem.dock_status.svg

Exit codes: 0 a setting is recommended and its validation run held · 3 no setting met the target ·
4 the validation run missed the target · 64 bad input (unknown table, sample field missing, …) ·
130 / 143 interrupted (the scratch copy is dropped first).`;

/** Registers `tune`: pick settings for a p99 target on your store. The tuner loads when it runs. */
export function registerTune(program: Command): void {
  program
    .command('tune')
    .description(
      'Measure batch settings against your own store and recommend one. With --table: on a scratch copy of your PostgreSQL table, with your records, at your rate, at the least store cost.',
    )
    .requiredOption(
      '--to <url>',
      'the store: postgres://…, redis://…, kafka://host:port, or sim:<ms> / noop: to try it out',
    )
    .requiredOption('--p99 <ms>', 'p99 accept → durable target, ms', positive)
    .option('--table <schema.table>', 'tune on a scratch copy of this PostgreSQL table')
    .addOption(new Option('--mode <mode>', 'PostgreSQL write mode').choices(['insert', 'copy', 'upsert']))
    .option('--key <columns>', 'upsert conflict key, comma-separated (default: the primary key)', list)
    .option(
      '--sample <file>',
      'your records: .csv/.tsv or .ndjson/.jsonl, fields named as the columns (cycled)',
    )
    .option(
      '--shape <list>',
      `arrival shape: ${TABLE_SHAPES.join(', ')} (replay follows --timestamp-column); without --table a list the setting must meet (default steady,trickle)`,
      shapeList,
    )
    .option(
      '--timestamp-column <field>',
      'with --shape replay: the sample field whose times the load follows',
    )
    .option(
      '--rate <n>',
      'offered records/s (default 1000 with --table, 5000 without; replay: the recording’s own)',
      positive,
    )
    .option(
      '--headroom <percent>',
      'with --table: a setting must reach p99 ≤ target less this much (default 25)',
      fraction,
    )
    .option('--budget <s>', 'with --table: time the search may take, seconds (default 60)', positive)
    .option(
      '--duration <ms>',
      'length of each trial, ms (default 2000 with --table; else 1500, trickle and gap 3000)',
      positive,
    )
    .option(
      '--validate <s>',
      'with --table: length of the validation run, seconds; 0 skips it (default 10)',
      wholeOrZero,
    )
    .option(
      '--prefill <rows>',
      'with --table: fill the copy with this many rows before measuring',
      wholeOrZero,
    )
    .option('--max-concurrency <n>', 'with --table: highest concurrency tried (default 4)', positive)
    .option(
      '--chart <file>',
      'with --table: where to write the SVG chart (default ./spillway-tune/<table>.svg)',
    )
    .option('--json', 'print the full outcome as JSON')
    .addHelpText('after', EXAMPLE)
    .action(async (o: TuneCommandOptions) => {
      if (o.table !== undefined) return tuneTableCommand(o);
      const { formatTune, storeFromUrl, tune } = await import('@spillway/tuner');
      const named = o.shape ?? ['steady', 'trickle'];
      let chosen: ShapeName[];
      try {
        chosen = shapes(named.join(','));
      } catch {
        throw new InvalidArgumentError('--shape replay needs --table and --sample with --timestamp-column');
      }
      let store: ReturnType<typeof storeFromUrl>;
      try {
        store = storeFromUrl(o.to, o.mode);
      } catch (e) {
        throw new InvalidArgumentError(`--to: ${(e as Error).message}`);
      }
      process.stderr.write(`Trying settings on ${redact(o.to)} (each trial in a fresh process) …\n`);
      const outcome = await tune({
        store,
        p99Ms: o.p99,
        shapes: chosen,
        rate: o.rate ?? 5000,
        ...(o.duration ? { durationMs: o.duration } : {}),
        onProgress: (p) => {
          const s = p.cell.settings;
          const what = p.error
            ? 'failed'
            : `${Math.round(p.result?.throughput ?? 0)}/s, p99 ${p.result?.latencyWithStuckMs.p99.toFixed(1)} ms`;
          process.stderr.write(
            `  [${p.done}/${p.total}] ${p.cell.shape.shape} maxRecords ${s.maxRecords} maxAgeMs ${s.maxAgeMs}: ${what}\n`,
          );
        },
      });
      process.stdout.write(o.json ? `${JSON.stringify(outcome, null, 1)}\n` : `${formatTune(outcome)}\n`);
      if (!outcome.best) process.exitCode = 3;
    });
}

const redact = (url: string) => url.replace(/\/\/[^@/]*@/, '//***@');

async function tuneTableCommand(o: TuneCommandOptions): Promise<void> {
  const { formatTableTune, tableChart, tuneTable } = await import('@spillway/tuner');
  const fail = (message: string, code: number) => {
    process.stderr.write(`spillway tune: ${message}\n`);
    process.exitCode = code;
  };
  if (!/^postgres(ql)?:\/\//i.test(o.to)) return fail('--table works with a postgres:// --to only', 64);
  if ((o.shape?.length ?? 0) > 1) return fail('--shape takes one shape with --table', 64);
  const shape = o.shape?.[0] as ShapeName | 'replay' | undefined;
  const err = process.stderr;
  const started = Date.now();
  try {
    const outcome = await tuneTable({
      url: o.to,
      table: o.table!,
      p99Ms: o.p99,
      ...(o.mode ? { mode: o.mode } : {}),
      ...(o.key ? { key: o.key } : {}),
      ...(o.sample ? { sample: o.sample } : {}),
      ...(o.timestampColumn ? { timestampColumn: o.timestampColumn } : {}),
      ...(shape ? { shape } : {}),
      ...(o.rate ? { rate: o.rate } : {}),
      ...(o.headroom !== undefined ? { headroom: o.headroom } : {}),
      ...(o.budget ? { budgetMs: o.budget * 1000 } : {}),
      ...(o.duration ? { trialMs: o.duration } : {}),
      ...(o.validate !== undefined ? { validateMs: o.validate * 1000 } : {}),
      ...(o.prefill !== undefined ? { prefill: o.prefill } : {}),
      ...(o.maxConcurrency ? { maxConcurrency: Math.floor(o.maxConcurrency) } : {}),
      onProgress: (e) => {
        const at = `${((Date.now() - started) / 1000).toFixed(0)} s`;
        if (e.kind === 'note') err.write(`${e.text}\n`);
        else if (e.kind === 'plan')
          err.write(
            `Plan: up to ${e.trials} trials, about ${Math.ceil(e.estimateMs / 1000)} s${e.validateMs > 0 ? `, then a ${Math.round(e.validateMs / 1000)} s validation run` : ''}.\n`,
          );
        else if (e.kind === 'trial') {
          const t = e.trial;
          const s = t.settings;
          err.write(
            `  [${e.done}/${e.total} ${at}] maxRecords ${s.maxRecords} maxAgeMs ${s.maxAgeMs} idleMs ${s.idleMs} concurrency ${s.concurrency}: ` +
              `p99 ${t.p99Ms.toFixed(1)} ms, ${Math.round(t.throughput)} records/s, ${Math.round(t.writesPerSecond)} writes/s, ${(t.storeMsPerRecord * 1000).toFixed(1)} µs/record` +
              `${t.deadLettered > 0 ? `, ${t.deadLettered} refused (${t.firstError})` : ''}\n`,
          );
        } else
          err.write(
            `  validating maxRecords ${e.settings.maxRecords} maxAgeMs ${e.settings.maxAgeMs} idleMs ${e.settings.idleMs} concurrency ${e.settings.concurrency} for ${Math.round(e.durationMs / 1000)} s …\n`,
          );
      },
    });
    const chart = resolve(o.chart ?? `spillway-tune/${outcome.table}.svg`);
    if (outcome.trials.length > 0) {
      await mkdir(dirname(chart), { recursive: true });
      await writeFile(chart, tableChart(outcome));
    }
    if (o.json) process.stdout.write(`${JSON.stringify({ ...outcome, chart }, null, 1)}\n`);
    else process.stdout.write(`${formatTableTune(outcome)}\n\nChart: ${chart}\n`);
    if (!outcome.recommended) process.exitCode = 3;
    else if (outcome.validation && !outcome.validation.holds) process.exitCode = 4;
  } catch (error) {
    const e = error as Error & { code?: string; details?: { signal?: string } };
    if (e.code === 'SPILLWAY_ABORTED') return fail(e.message, e.details?.signal === 'SIGTERM' ? 143 : 130);
    if (e.code === 'SPILLWAY_INVALID_OPTION' || e.code === 'SPILLWAY_INPUT_ERROR') return fail(e.message, 64);
    throw error;
  }
}
