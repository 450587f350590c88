import { type DeadLetterTarget, Sink, type SinkOptions } from '@spillway/core';
import { CsvLine, CsvRun, type Row } from '@spillway/ingest';
import { UsageError } from './usage-error.js';

// Each store's driver and adapter are loaded only when a URL names that store: loading all three
// would cost every run the start-up time of the two it does not use.

/** Default batch size of a PostgreSQL copy (`--batch-size` overrides it). */
export const COPY_BATCH_ROWS = 5000;

/**
 * What the ingest hands the sink: a row object, a valid CSV row as its text, or a run of valid
 * CSV rows as their text (only to a PostgreSQL copy, which takes them as they are).
 */
export type IngestRecord = Row | CsvLine | CsvRun;

/** The row an ingest record stands for (a run is never mapped: it goes to COPY as its text). */
export function rowOf(r: IngestRecord): Row {
  if (r instanceof CsvRun) throw new TypeError('a run of CSV rows has no single row');
  return r instanceof CsvLine ? r.row() : r;
}

export interface TargetFlags {
  to: string;
  table?: string;
  pgSchema?: string;
  mode?: 'insert' | 'copy' | 'upsert';
  key?: string;
  keyTemplate?: string;
  ttlMs?: number;
  topic?: string;
  messageKey?: string;
}

export interface Target {
  sink: Sink<IngestRecord>;
  /** The sink takes valid CSV rows as their text (`CsvLine`, `CsvRun`): PostgreSQL `copy` mode. */
  takesCsvLines: boolean;
  /** What the summary prints as the destination (no credentials). */
  label: string;
  /** Closes the sink (every row terminal) and the client. */
  close(): Promise<void>;
}

/** The store a `--to` URL names, with the sink the mapping flags describe. */
export async function openTarget(
  flags: TargetFlags,
  columns: string[] | undefined,
  sinkOptions: SinkOptions<IngestRecord>,
  deadLetter: DeadLetterTarget<IngestRecord>,
): Promise<Target> {
  let url: URL;
  try {
    url = new URL(flags.to);
  } catch {
    throw new UsageError(`--to: "${flags.to}" is not a URL (postgres://…, redis://…, kafka://host:port)`);
  }
  const options: SinkOptions<IngestRecord> = { ...sinkOptions, deadLetter };
  const safe = `${url.protocol}//${url.host}${url.pathname === '/' ? '' : url.pathname}`;
  switch (url.protocol) {
    case 'postgres:':
    case 'postgresql:': {
      if (!flags.table) throw new UsageError('--table is required with a postgres:// target');
      if (!columns)
        throw new UsageError(
          'a postgres:// target needs the column names: give --columns or --schema (or a CSV file with a header)',
        );
      const keys = flags.key ? splitList(flags.key) : undefined;
      const mode = flags.mode ?? (keys ? 'upsert' : 'copy');
      if (mode === 'upsert' && !keys)
        throw new UsageError('--mode upsert needs --key <columns>: the conflict key');
      if (mode !== 'upsert' && keys) throw new UsageError(`--key is used by --mode upsert, not ${mode}`);
      const [{ default: pg }, { postgresAdapter }] = await Promise.all([
        import('pg'),
        import('@spillway/postgres'),
      ]);
      const pool = new pg.Pool({
        connectionString: flags.to,
        max: Math.max(2, (sinkOptions.concurrency ?? 1) + 1),
      });
      const adapter = postgresAdapter<IngestRecord>({
        pool,
        table: flags.table,
        ...(flags.pgSchema && { schema: flags.pgSchema }),
        columns,
        map: (record) => {
          const r = rowOf(record);
          // A plain loop: this runs twice per row (size estimate, then the write).
          const values = new Array<unknown>(columns.length);
          for (let i = 0; i < columns.length; i++) values[i] = r[columns[i]!];
          return values;
        },
        mode,
        ...(keys && { conflict: { key: keys } }),
        // COPY (FORMAT csv) takes a valid row's text as it is: no row object, no re-encoding.
        ...(mode === 'copy' && {
          csvLine: (r) => (r instanceof CsvLine || r instanceof CsvRun ? r.bytes : undefined),
        }),
      });
      const sink = new Sink(adapter, {
        name: `postgres:${flags.table}`,
        // Each COPY statement costs the server about 0.7 ms besides its rows, some 40 % of what
        // 1,000 rows cost it (benchmarks/README.md, "Ingest speed"): bigger batches, unless the
        // user chose.
        ...(mode === 'copy' && { maxRecords: COPY_BATCH_ROWS }),
        ...options,
      });
      return {
        sink,
        takesCsvLines: mode === 'copy',
        label: `${safe} table ${flags.pgSchema ? `${flags.pgSchema}.` : ''}${flags.table} (${mode}${keys ? ` on ${keys.join(', ')}` : ''})`,
        async close() {
          try {
            await sink.close();
          } finally {
            await pool.end();
          }
        },
      };
    }
    case 'redis:':
    case 'rediss:': {
      if (!flags.keyTemplate)
        throw new UsageError(
          '--key-template is required with a redis:// target, e.g. "tandem:service:{record_id}"',
        );
      const key = template(flags.keyTemplate);
      const [{ Redis }, { hashFields, redisAdapter }] = await Promise.all([
        import('ioredis'),
        import('@spillway/redis'),
      ]);
      const client = new Redis(flags.to, { lazyConnect: true, maxRetriesPerRequest: 2 });
      await client.connect();
      const adapter = redisAdapter<IngestRecord>({
        client,
        mapping: hashFields<IngestRecord>({
          key: (r) => key(rowOf(r)),
          fields: (r) => hashOf(rowOf(r)),
          ...(flags.ttlMs !== undefined && { ttlMs: flags.ttlMs }),
        }),
      });
      const sink = new Sink(adapter, { name: 'redis', ...options });
      return {
        sink,
        takesCsvLines: false,
        label: `${safe} hashes ${flags.keyTemplate}`,
        async close() {
          try {
            await sink.close();
          } finally {
            client.disconnect();
          }
        },
      };
    }
    case 'kafka:': {
      if (!flags.topic) throw new UsageError('--topic is required with a kafka:// target');
      const [{ Kafka, logLevel }, { kafkaProducerAdapter }] = await Promise.all([
        import('kafkajs'),
        import('@spillway/kafka'),
      ]);
      const brokers = `${url.host}${url.pathname === '/' ? '' : url.pathname}`.split(',').filter(Boolean);
      const kafka = new Kafka({ clientId: 'spillway-ingest', brokers, logLevel: logLevel.NOTHING });
      const messageKey = flags.messageKey;
      const adapter = kafkaProducerAdapter<IngestRecord>({
        kafka,
        topic: flags.topic,
        mapper: (record) => {
          const r = rowOf(record);
          return {
            value: JSON.stringify(r),
            ...(messageKey !== undefined && { key: r[messageKey] == null ? null : String(r[messageKey]) }),
          };
        },
      });
      const sink = new Sink(adapter, { name: `kafka:${flags.topic}`, ...options });
      return {
        sink,
        takesCsvLines: false,
        label: `kafka ${brokers.join(',')} topic ${flags.topic}`,
        close: () => sink.close(),
      };
    }
    default:
      throw new UsageError(`--to: unsupported scheme "${url.protocol}" (postgres://, redis://, kafka://)`);
  }
}

function splitList(text: string): string[] {
  return text
    .split(',')
    .map((s) => s.trim())
    .filter(Boolean);
}

/** `tandem:service:{record_id}` → a key function; a row without the named value is refused by the store as bad data. */
function template(text: string): (r: Row) => string {
  const names = [...text.matchAll(/\{([^}]+)\}/g)].map((m) => m[1]!);
  if (names.length === 0)
    throw new UsageError(
      '--key-template must name at least one column in braces, e.g. "tandem:service:{record_id}"',
    );
  return (r) =>
    text.replace(/\{([^}]+)\}/g, (_, name: string) => {
      const v = r[name];
      if (v === null || v === undefined || v === '') throw new RangeError(`key column ${name} is empty`);
      return String(v);
    });
}

function hashOf(r: Row): Record<string, string> {
  // fromEntries makes every name an own property (`out['__proto__'] = …` would drop the column).
  return Object.fromEntries(
    Object.entries(r)
      .filter(([, v]) => v !== null && v !== undefined)
      .map(([k, v]) => [
        k,
        v instanceof Date ? v.toISOString() : typeof v === 'object' ? JSON.stringify(v) : String(v),
      ]),
  );
}
