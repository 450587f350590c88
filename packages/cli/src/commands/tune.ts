import { type Command, InvalidArgumentError, Option } from 'commander';
import { SHAPE_NAMES, type ShapeName } from '../bench/shape-names.js';
import { list, positive, shapes } from './bench.js';
import { fail, runUserTune, type SearchFlags, searchOptions } from './tune-run.js';
import { type KafkaFlags, type RedisFlags, tuneKafkaCommand, tuneRedisCommand } from './tune-stores.js';

interface TuneCommandOptions extends SearchFlags, RedisFlags, KafkaFlags {
  to: string;
  mode?: 'insert' | 'copy' | 'upsert';
  table?: string;
  key?: string[];
  prefill?: number;
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

With --key-template (Redis) the trials run your mapping (--mapping hash, string, sorted-set, stream
or counter, from the fields you name) with every key under a scratch prefix,
spillway-tune:<random>:<your key>, deleted between trials, at the end, on an error and on Ctrl-C.
With --topic (Kafka) they send to a scratch topic made with your topic's partition count,
replication factor and topic configs as the broker reports them, deleted the same way. Your keys
and your topic are never written. Both need --sample.

Example (Redis, a real run, trimmed where marked; the README shows it whole):

  $ spillway tune --to redis://127.0.0.1:6379 --key-template 'tandem:dock:{dock_id}' \\
      --fields bikes_available,docks_free,status,reported_at --sample dock-status.ndjson \\
      --rate 2000 --p99 50 --budget 30 --validate 10 --chart /tmp/tune-smoke/redis-example.svg
  Scratch keys: spillway-tune:719c3f7f:<your key> (deleted at the end, on an error and on Ctrl-C).
  Plan: up to 12 trials, about 29 s, then a 10 s validation run.
    [1/12 3 s] maxRecords 10 maxAgeMs 5 idleMs 5 concurrency 1: p99 81.2 ms, 1990 records/s, 199 writes/s, 462.4 µs/record
    [2/12 5 s] maxRecords 50 maxAgeMs 5 idleMs 5 concurrency 1: p99 21.5 ms, 2064 records/s, 115 writes/s, 144.7 µs/record
    …
    validating maxRecords 20 maxAgeMs 13 idleMs 13 concurrency 1 for 10 s …
  Keys tandem:dock:{dock_id} on Redis 7.0.15, hash mapping (fields bikes_available, docks_free, status, reported_at), each batch one pipeline.
  Measured on scratch keys spillway-tune:719c3f7f:<your key>, deleted between trials and afterwards; your keys were not written.
  The scratch keys lack:
    - the values your keys already hold (the scratch keys start empty at each trial)
    - the other traffic your server serves
  Records: 1,500 records of dock-status.ndjson, cycled; fields dock_id, station_id, bikes_available, docks_free, status, reported_at, firmware.
  Load: steady at 2,000 records/s, 2000 ms per trial. Target: p99 accept → durable ≤ 50 ms; with 25 % headroom a setting must reach ≤ 37.5 ms.
  Store write cost fitted over 3,183 writes: 1.89 ms + 39.2 µs per record.

  | maxRecords | maxAgeMs | idleMs | concurrency | p99 ms | records/s | writes/s | store µs/record | ceiling/s (est.) | meets                                                 |
  |------------|----------|--------|-------------|--------|-----------|----------|-----------------|------------------|-------------------------------------------------------|
  |         50 |       25 |     25 |           1 |   50.0 |     2,034 |       43 |            47.5 |           12,986 | no: p99 49.95 ms > 37.5 ms                            |
  |         20 |       13 |     13 |           1 |   21.4 |     1,972 |      100 |            54.0 |            7,476 | yes ◀                                                 |
  |        200 |       25 |     25 |           1 |   68.4 |     2,020 |       33 |            70.8 |           20,562 | no: p99 68.42 ms > 37.5 ms                            |
    … 9 more rows, one per setting tried

  Recommended: maxRecords 20, maxAgeMs 13, idleMs 13, concurrency 1
    p99 21.4 ms (aim ≤ 37.5 ms), 1,972 records/s, 100 writes/s, 54.0 µs of store time per record, estimated ceiling 7,476 records/s.

  Validation: 10 s at 2,000 records/s on the scratch keys, maxRecords 20, maxAgeMs 13, idleMs 13, concurrency 1 — the advice holds.
    p99 26.6 ms (target 50 ms) · 2,014 records/s durable (offered 2,014) · 0 stuck · 0 refused · 70.2 µs store time per record

  Options to paste:

  import { Sink } from '@spillway/core';
  import { hashFields, redisAdapter } from '@spillway/redis';

  // Tuned for p99 ≤ 50 ms at 2,000 records/s (steady), hash mapping.
  const sink = new Sink<Record<string, unknown>>(
    redisAdapter({
      client, // your ioredis client
      mapping: hashFields<Record<string, unknown>>({
        key: (r) => \`tandem:dock:\${String(r.dock_id ?? '')}\`,
        fields: (r) => ({
          bikes_available: String(r.bikes_available ?? ''),
          docks_free: String(r.docks_free ?? ''),
          status: String(r.status ?? ''),
          reported_at: String(r.reported_at ?? ''),
        }),
      }),
    }),
    { maxRecords: 20, maxAgeMs: 13, idleMs: 13, concurrency: 1 },
  );

  Chart: /tmp/tune-smoke/redis-example.svg

Example (Kafka, a real run, trimmed where marked; the README shows it whole):

  $ spillway tune --to kafka://127.0.0.1:39661 --topic tandem.dock-events --message-key dock_id \\
      --sample dock-status.ndjson --rate 2000 --p99 200 --budget 30 --validate 10 \\
      --chart /tmp/tune-smoke/kafka-example.svg
  Scratch topic: spillway-tune-18bd61e6, 6 partition(s), replication factor 1, min.insync.replicas=1, retention.ms=86400000 (deleted at the end, on an error and on Ctrl-C).
  Plan: up to 12 trials, about 30 s, then a 10 s validation run.
    [1/12 3 s] maxRecords 50 maxAgeMs 20 idleMs 20 concurrency 1: p99 130.8 ms, 2029 records/s, 45 writes/s, 328.7 µs/record
    [2/12 5 s] maxRecords 200 maxAgeMs 20 idleMs 20 concurrency 1: p99 100.7 ms, 2064 records/s, 35 writes/s, 157.2 µs/record
    …
    validating maxRecords 1000 maxAgeMs 100 idleMs 100 concurrency 2 for 10 s …
  Topic tandem.dock-events on Kafka cluster Bz0MfFoqesUgzlRD7pQKKg, 1 broker(s): 6 partition(s), replication factor 1, topic configs: min.insync.replicas=1, retention.ms=86400000.
  Measured on a scratch topic spillway-tune-18bd61e6 made with the same partitions, replication factor and topic configs, deleted afterwards; your topic was not written.
  Producer: acks -1, idempotent, compression none, key dock_id.
  The scratch topic lacks:
    - your topic's consumers and the other producers writing to it (their load on the brokers)
    - your value format: each record is sent as its JSON
  Records: 1,500 records of dock-status.ndjson, cycled, each sent as its JSON (164 bytes on average); fields dock_id, station_id, bikes_available, docks_free, status, reported_at, firmware.
  Load: steady at 2,000 records/s, 2000 ms per trial. Target: p99 accept → durable ≤ 200 ms; with 25 % headroom a setting must reach ≤ 150 ms.
  Store write cost fitted over 636 writes: 6.93 ms + 8.1 µs per record.

  | maxRecords | maxAgeMs | idleMs | concurrency | p99 ms | records/s | writes/s | store µs/record | ceiling/s (est.) | meets |
  |------------|----------|--------|-------------|--------|-----------|----------|-----------------|------------------|-------|
  |       1000 |      100 |    100 |           2 |  110.1 |     1,993 |       10 |            31.3 |          133,527 | yes ◀ |
  |       1000 |      100 |    100 |           1 |  114.9 |     2,020 |       10 |            36.1 |           66,764 | yes   |
  |       1000 |      100 |     20 |           1 |  117.0 |     2,007 |       10 |            40.3 |           66,764 | yes   |
    … 9 more rows, one per setting tried

  Recommended: maxRecords 1000, maxAgeMs 100, idleMs 100, concurrency 2
    p99 110.1 ms (aim ≤ 150 ms), 1,993 records/s, 10 writes/s, 31.3 µs of store time per record, estimated ceiling 133,527 records/s.

  Validation: 10 s at 2,000 records/s on the scratch topic, maxRecords 1000, maxAgeMs 100, idleMs 100, concurrency 2 — the advice holds.
    p99 118.1 ms (target 200 ms) · 2,014 records/s durable (offered 2,014) · 0 stuck · 0 refused · 39.2 µs store time per record

  Options to paste:

  import { Sink } from '@spillway/core';
  import { kafkaProducerAdapter } from '@spillway/kafka';

  // Tuned for p99 ≤ 200 ms at 2,000 records/s (steady) on a topic like tandem.dock-events.
  const sink = new Sink<Record<string, unknown>>(
    kafkaProducerAdapter({
      kafka, // your kafkajs client
      topic: "tandem.dock-events",
      mapper: (r) => ({ key: String(r.dock_id ?? ''), value: JSON.stringify(r) }),
    }),
    {
      maxRecords: 1000,
      maxAgeMs: 100,
      idleMs: 100,
      concurrency: 2,
      orderingKey: (r) => String(r.dock_id ?? ''), // a key's batches never in flight together
    },
  );

  Chart: /tmp/tune-smoke/kafka-example.svg

Exit codes: 0 a setting is recommended and its validation run held · 3 no setting met the target ·
4 the validation run missed the target · 64 bad input (unknown table, topic or sample field, …) ·
69 the server could not be connected to · 130 / 143 interrupted (the scratch copy, keys or topic
are removed first).`;

/** Registers `tune`: pick settings for a p99 target on your store. The tuner loads when it runs. */
export function registerTune(program: Command): void {
  const own = 'with --table, --key-template or --topic';
  program
    .command('tune')
    .description(
      'Measure batch settings against your own store and recommend one: on a scratch copy of your PostgreSQL table (--table), with your Redis key template and mapping (--key-template) or on a scratch topic made like yours (--topic), with your records, at your rate, at the least store cost.',
    )
    .requiredOption(
      '--to <url>',
      'the store: postgres://…, redis://…, kafka://host:port[,host:port], or sim:<ms> / noop: to try it out',
    )
    .requiredOption('--p99 <ms>', 'p99 accept → durable target, ms', positive)
    .option('--table <schema.table>', 'tune on a scratch copy of this PostgreSQL table')
    .addOption(new Option('--mode <mode>', 'PostgreSQL write mode').choices(['insert', 'copy', 'upsert']))
    .option('--key <columns>', 'upsert conflict key, comma-separated (default: the primary key)', list)
    .option(
      '--prefill <rows>',
      'with --table: fill the copy with this many rows before measuring',
      wholeOrZero,
    )
    .option(
      '--key-template <template>',
      'tune with your Redis keys: a template of text and {field} placeholders filled from each record, e.g. tandem:dock:{dock_id} (written under a scratch prefix)',
    )
    .addOption(
      new Option(
        '--mapping <kind>',
        'with --key-template: the @spillway/redis mapping (default hash)',
      ).choices(['hash', 'string', 'sorted-set', 'stream', 'counter']),
    )
    .option(
      '--fields <list>',
      'hash / stream: the record fields written, comma-separated (default: every field not in the key)',
      list,
    )
    .option('--value-field <field>', 'string: the field whose value is set (default: the record as JSON)')
    .option('--member-field <field>', 'sorted-set: the member field')
    .option('--score-field <field>', 'sorted-set: the score field')
    .option('--by-field <field>', 'counter: the field holding the increment (default 1)')
    .option('--ttl <ms>', 'string / hash: expiry of each key, ms', positive)
    .option('--max-len <n>', 'stream: trim to about this many entries', wholeOrZero)
    .option('--atomic', 'with --key-template: each batch as one MULTI/EXEC')
    .option(
      '--topic <name>',
      'tune a Kafka producer sink on a scratch topic made like this one (partitions, replication factor, topic configs); yours is never written',
    )
    .option('--message-key <field>', 'with --topic: the record field used as the message key')
    .addOption(
      new Option('--acks <n>', 'with --topic: acks of the producer (default -1)').choices(['-1', '0', '1']),
    )
    .option('--no-idempotent', 'with --topic: a producer without idempotence')
    .addOption(
      new Option('--compression <codec>', 'with --topic: batch codec (default none)').choices([
        'none',
        'gzip',
      ]),
    )
    .option(
      '--sample <file>',
      'your records: .csv/.tsv or .ndjson/.jsonl, fields by name (cycled); required with --key-template and --topic',
    )
    .option(
      '--shape <list>',
      `arrival shape: ${TABLE_SHAPES.join(', ')} (replay follows --timestamp-column); on the tuner's own store a list the setting must meet (default steady,trickle)`,
      shapeList,
    )
    .option(
      '--timestamp-column <field>',
      'with --shape replay: the sample field whose times the load follows',
    )
    .option(
      '--rate <n>',
      `offered records/s (default 1000 ${own}, else 5000; replay: the recording’s own)`,
      positive,
    )
    .option(
      '--headroom <percent>',
      `${own}: a setting must reach p99 ≤ target less this much (default 25)`,
      fraction,
    )
    .option('--budget <s>', `${own}: time the search may take, seconds (default 60)`, positive)
    .option(
      '--duration <ms>',
      `length of each trial, ms (default 2000 ${own}; else 1500, trickle and gap 3000)`,
      positive,
    )
    .option(
      '--validate <s>',
      `${own}: length of the validation run, seconds; 0 skips it (default 10)`,
      wholeOrZero,
    )
    .option('--max-concurrency <n>', `${own}: highest concurrency tried (default 4)`, positive)
    .option(
      '--chart <file>',
      `${own}: where to write the SVG chart (default ./spillway-tune/<table, key template or topic>.svg)`,
    )
    .option('--json', 'print the full outcome as JSON')
    .addHelpText('after', EXAMPLE)
    .action(async (o: TuneCommandOptions) => {
      const own = [o.table && '--table', o.keyTemplate && '--key-template', o.topic && '--topic'].filter(
        (f): f is string => typeof f === 'string',
      );
      if (own.length > 1)
        return fail(`${own.join(' and ')} do not go together: tune one store at a time`, 64);
      if (own.length === 1 && (o.shape?.length ?? 0) > 1)
        return fail(`--shape takes one shape with ${own[0]}`, 64);
      const stray = strayFlag(o);
      if (stray) return fail(stray, 64);
      if (o.table !== undefined) return tuneTableCommand(o);
      if (o.keyTemplate !== undefined) return tuneRedisCommand(o);
      if (o.topic !== undefined) return tuneKafkaCommand(o);
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

/** A flag of one store's tune given without that store's flag, named with the flag it needs. */
function strayFlag(o: TuneCommandOptions): string | undefined {
  const groups: [string, unknown, [string, unknown][]][] = [
    [
      '--key-template',
      o.keyTemplate,
      [
        ['--mapping', o.mapping],
        ['--fields', o.fields],
        ['--value-field', o.valueField],
        ['--member-field', o.memberField],
        ['--score-field', o.scoreField],
        ['--by-field', o.byField],
        ['--ttl', o.ttl],
        ['--max-len', o.maxLen],
        ['--atomic', o.atomic],
      ],
    ],
    [
      '--topic',
      o.topic,
      [
        ['--message-key', o.messageKey],
        ['--acks', o.acks],
        ['--no-idempotent', o.idempotent === false ? true : undefined],
        ['--compression', o.compression],
      ],
    ],
  ];
  for (const [owner, given, flags] of groups)
    if (given === undefined)
      for (const [flag, value] of flags) if (value !== undefined) return `${flag} goes with ${owner} only`;
  return undefined;
}

const redact = (url: string) => url.replace(/\/\/[^@/]*@/, '//***@');

async function tuneTableCommand(o: TuneCommandOptions): Promise<void> {
  const { formatTableTune, tableChart, tuneTable } = await import('@spillway/tuner');
  if (!/^postgres(ql)?:\/\//i.test(o.to)) return fail('--table works with a postgres:// --to only', 64);
  await runUserTune(
    o,
    (onProgress) =>
      tuneTable({
        ...searchOptions(o),
        url: o.to,
        table: o.table!,
        ...(o.mode ? { mode: o.mode } : {}),
        ...(o.key ? { key: o.key } : {}),
        ...(o.prefill !== undefined ? { prefill: o.prefill } : {}),
        onProgress,
      }),
    { report: formatTableTune, chart: tableChart, chartName: (t) => t.table },
  );
}
