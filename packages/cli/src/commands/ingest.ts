import { stat, writeFile } from 'node:fs/promises';
import { messageOf } from '@spillway/core';
import {
  type ColumnSpec,
  type CsvLine,
  type CsvRun,
  formatFromPath,
  IngestError,
  type IngestFormat,
  type IngestOptions,
  type IngestSummary,
  ingest,
  ingestFile,
  RejectFile,
  type Row,
  readCsvHeader,
} from '@spillway/ingest';
import { Command, type CommanderError, InvalidArgumentError, Option } from 'commander';
import { parseColumnsFlag, readSchemaFile } from '../ingest/columns-flag.js';
import { type ProgressMode, progressView } from '../ingest/progress.js';
import { type IngestRecord, openTarget, rowOf } from '../ingest/targets.js';
import { UsageError } from '../ingest/usage-error.js';

/** Exit codes of `spillway ingest`. */
export const INGEST_EXIT = {
  /** Every row read was written and is durable. */
  ok: 0,
  /** Stopped before the end (input, store, reject limit, signal): rows counted as written are durable. */
  failed: 1,
  /** The input was read to the end and every valid row is durable, but some rows were rejected or refused by the store. */
  rejects: 2,
  /** The command line is wrong (sysexits.h EX_USAGE). */
  usage: 64,
  /** Stopped by SIGINT (128 + 2, shell convention). */
  interrupted: 130,
} as const;

interface Flags {
  to: string;
  format?: IngestFormat;
  delimiter?: string;
  header: boolean;
  columns?: string;
  schema?: string;
  table?: string;
  pgSchema?: string;
  mode?: 'insert' | 'copy' | 'upsert';
  key?: string;
  keyTemplate?: string;
  ttlMs?: number;
  topic?: string;
  messageKey?: string;
  rejects?: string;
  rejectFormat?: 'ndjson' | 'csv';
  maxRejects?: number;
  maxRowBytes?: number;
  blankLines?: 'skip' | 'reject';
  batchSize?: number;
  maxAgeMs?: number;
  concurrency?: number;
  summary?: string;
  progress: ProgressMode;
  quiet: boolean;
}

const int = (name: string, min: number) => (value: string) => {
  const n = Number(value);
  if (!Number.isInteger(n) || n < min) throw new InvalidArgumentError(`${name} must be an integer >= ${min}`);
  return n;
};

const EPILOG = `
Exit codes:
  0    every row was written and is durable
  2    the whole input was read and every valid row is durable, but some rows were
       rejected (see --rejects) or refused by the store
  1    stopped before the end of the input: unreadable input, a malformed header,
       more than --max-rejects rejects, or a store failure (rows reported written are durable)
  64   usage error (a flag is missing or wrong)
  130  interrupted (SIGINT): accepted rows were flushed first

Reject file: one line per rejected row with its physical line number (1-based, where
the record starts), the column at fault, a reason (csv-syntax, column-count, too-long,
utf8, json, not-object, blank, required, type, pattern, range, enum, schema, store)
and the raw row. It is created owner-only (0600): it holds partner data.

Examples:
  spillway ingest service-records.csv --to postgres://127.0.0.1:5432/test \\
    --table service_records --key record_id \\
    --columns 'record_id!,dock_id!,bike_id:integer!,serviced_at:timestamp!,odometer_km:number,passed:boolean,kind,note'
  spillway ingest records.ndjson --to redis://127.0.0.1:6379 --key-template 'tandem:service:{record_id}' \\
    --schema service-records.schema.json
  spillway ingest records.csv --to kafka://127.0.0.1:9092 --topic tandem.service-records --message-key bike_id
`;

/** Registers `spillway ingest <file> --to <url>`. */
export function registerIngest(program: Command): void {
  const cmd = new Command('ingest')
    .description(
      'Stream a CSV or NDJSON file (or - for stdin) into PostgreSQL, Redis or Kafka, with validation, a reject file and a summary.',
    )
    .argument('<file>', 'input file, or - to read standard input (then --format is required)')
    .requiredOption('--to <url>', 'target store: postgres://…, redis://…, or kafka://host:port[,host:port]')
    // input
    .addOption(
      new Option(
        '--format <format>',
        'input format (default: from the extension: .csv/.tsv, .ndjson/.jsonl)',
      ).choices(['csv', 'ndjson']),
    )
    .option('--delimiter <char>', 'CSV field delimiter (default "," or a tab for .tsv)')
    .option('--no-header', 'the CSV has no header row: --columns / --schema name the fields by position')
    .option(
      '--columns <spec>',
      'declared columns: name[:type][!],… with types string|integer|number|boolean|timestamp|json and ! for required',
    )
    .option(
      '--schema <file.json>',
      'declared columns as a JSON array of {name, type, required, pattern, min, max, enum, from}',
    )
    .option(
      '--max-row-bytes <n>',
      'longest CSV record / NDJSON line in bytes; longer ones are rejected (default 1048576)',
      int('--max-row-bytes', 1),
    )
    .addOption(
      new Option(
        '--blank-lines <what>',
        'NDJSON blank lines: skip them, or reject them (default skip)',
      ).choices(['skip', 'reject']),
    )
    // target mapping
    .option('--table <name>', 'PostgreSQL: target table (required for postgres://)')
    .option('--pg-schema <name>', 'PostgreSQL: schema of the table (default: the search_path)')
    .addOption(
      new Option(
        '--mode <mode>',
        'PostgreSQL: insert, copy or upsert (default copy; upsert when --key is given)',
      ).choices(['insert', 'copy', 'upsert']),
    )
    .option(
      '--key <columns>',
      'PostgreSQL upsert: the conflict key columns, comma-separated (makes re-uploads idempotent)',
    )
    .option(
      '--key-template <template>',
      "Redis: key of each row's hash, with {column} placeholders (required for redis://)",
    )
    .option('--ttl-ms <n>', 'Redis: expire each hash after this many ms', int('--ttl-ms', 1))
    .option(
      '--topic <name>',
      'Kafka: topic to write to (required for kafka://); each row becomes a JSON message',
    )
    .option('--message-key <column>', 'Kafka: column whose value is the message key')
    // rejects
    .option('--rejects <path>', 'reject file, created 0600 (default <file>.rejects.ndjson; .csv writes CSV)')
    .addOption(
      new Option('--reject-format <format>', 'reject file format (default: from the extension)').choices([
        'ndjson',
        'csv',
      ]),
    )
    .option(
      '--max-rejects <n>',
      'stop (exit 1) once more than n rows are rejected (default: no limit)',
      int('--max-rejects', 0),
    )
    // batching
    .option(
      '--batch-size <n>',
      'records per batch written to the store, at most 2 MiB (default 5000 into PostgreSQL in copy mode, where a record is a run of consecutive valid rows, up to 16 KiB; else 1000 rows)',
      int('--batch-size', 1),
    )
    .option(
      '--max-age-ms <n>',
      'longest a row waits in a batch before it is written (default 500)',
      int('--max-age-ms', 1),
    )
    .option(
      '--concurrency <n>',
      'batches in flight at once (default 1; one file keeps its row order)',
      int('--concurrency', 1),
    )
    // output
    .option('--summary <path>', 'also write the summary as JSON to this file')
    .addOption(
      new Option(
        '--progress <mode>',
        'progress display: auto (a bar on a terminal, lines otherwise), bar, lines, none',
      )
        .choices(['auto', 'bar', 'lines', 'none'])
        .default('auto'),
    )
    .option('-q, --quiet', 'print nothing but errors (the summary still goes to --summary)', false)
    .addHelpText('after', EPILOG)
    .showHelpAfterError('(spillway ingest --help lists every flag)')
    .exitOverride((error: CommanderError) => {
      // Help and version are not errors; every other parse error is a usage error.
      process.exit(error.exitCode === 0 ? 0 : INGEST_EXIT.usage);
    })
    .action(async (file: string, flags: Flags) => {
      process.exitCode = await runIngest(file, flags);
    });
  program.addCommand(cmd);
}

async function runIngest(file: string, flags: Flags): Promise<number> {
  const say = (text: string) => {
    if (!flags.quiet) process.stdout.write(text);
  };
  let target: Awaited<ReturnType<typeof openTarget>> | undefined;
  const abort = new AbortController();
  let interrupted = false;
  const onSigint = () => {
    if (interrupted) process.exit(INGEST_EXIT.interrupted);
    interrupted = true;
    process.stderr.write(
      '\nspillway ingest: interrupted, flushing the rows read so far (Ctrl-C again to quit now)\n',
    );
    abort.abort();
  };
  try {
    const fromStdin = file === '-';
    const format = flags.format ?? (fromStdin ? undefined : formatFromPath(file));
    if (!format)
      throw new UsageError(
        `--format is required: it cannot be told from ${fromStdin ? 'standard input' : `"${file}"`}`,
      );
    const totalBytes = fromStdin ? undefined : (await stat(file).catch(() => undefined))?.size;
    if (!fromStdin && totalBytes === undefined) throw new UsageError(`cannot read ${file}`);
    const columns: ColumnSpec[] | undefined = flags.schema
      ? await readSchemaFile(flags.schema)
      : flags.columns
        ? parseColumnsFlag(flags.columns)
        : undefined;
    if (flags.columns && flags.schema) throw new UsageError('give --columns or --schema, not both');
    const delimiter = flags.delimiter ?? (file.toLowerCase().endsWith('.tsv') ? '\t' : undefined);
    const names =
      columns?.map((c) => c.name) ??
      (format === 'csv' && !fromStdin && flags.header
        ? await readCsvHeader(file, delimiter === undefined ? {} : { delimiter })
        : undefined);

    const rejectsPath = flags.rejects ?? (fromStdin ? 'stdin.rejects.ndjson' : `${file}.rejects.ndjson`);
    const rejects = new RejectFile(rejectsPath, flags.rejectFormat);
    target = await openTarget(
      flags,
      names,
      {
        ...(flags.batchSize !== undefined && { maxRecords: flags.batchSize }),
        ...(flags.maxAgeMs !== undefined && { maxAgeMs: flags.maxAgeMs }),
        ...(flags.concurrency !== undefined && { concurrency: flags.concurrency }),
      },
      rejects.deadLetterTarget<IngestRecord>((r) => jsonRow(rowOf(r))),
    );

    const view = progressView(flags.quiet ? 'none' : flags.progress, totalBytes);
    process.on('SIGINT', onSigint);
    const options: IngestOptions<IngestRecord> = {
      format,
      header: flags.header,
      ...(delimiter !== undefined && { delimiter }),
      ...(columns && { columns }),
      // Valid CSV rows go to a COPY as their own text.
      // Valid rows go to a COPY as their own text, consecutive ones as one record.
      ...(target.takesCsvLines && { asCsvLine: (line: CsvLine) => line, asCsvRun: (run: CsvRun) => run }),
      rejects,
      ...(flags.maxRejects !== undefined && { maxRejects: flags.maxRejects }),
      ...(flags.maxRowBytes !== undefined && { maxRowBytes: flags.maxRowBytes }),
      ...(flags.blankLines !== undefined && { blankLines: flags.blankLines }),
      signal: abort.signal,
      progressIntervalMs: process.stdout.isTTY ? 200 : 5000,
      onProgress: (p) => view.update(p),
    };
    let summary: IngestSummary;
    let stopped: IngestError | undefined;
    try {
      summary = fromStdin
        ? await ingest(process.stdin, target.sink, { ...options, sourceName: 'stdin' })
        : await ingestFile(file, target.sink, options);
    } catch (error) {
      if (!(error instanceof IngestError)) throw error;
      stopped = error;
      summary = error.summary;
    } finally {
      view.stop();
    }
    // Closing waits for every accepted row; after a store failure it reports that failure again.
    let closeError: unknown;
    try {
      await target.close();
    } catch (error) {
      closeError = error;
    }
    target = undefined;
    await rejects.close();
    const problem = stopped?.message ?? (closeError === undefined ? undefined : messageOf(closeError));
    const report = {
      ...summary,
      target: targetLabel(flags),
      rejectsFile: summary.rowsRejected + summary.rowsDeadLettered > 0 ? rejectsPath : undefined,
      error: problem,
    };
    if (flags.summary) await writeSummary(flags.summary, report);
    say(summaryText(summary, targetLabel(flags), rejectsPath, problem));
    if (interrupted) return INGEST_EXIT.interrupted;
    if (problem !== undefined) return INGEST_EXIT.failed;
    return summary.rowsRejected + summary.rowsDeadLettered > 0 ? INGEST_EXIT.rejects : INGEST_EXIT.ok;
  } catch (error) {
    process.stderr.write(`spillway ingest: ${messageOf(error)}\n`);
    return error instanceof UsageError ||
      (error instanceof TypeError && (error as { code?: string }).code === 'SPILLWAY_INVALID_OPTION')
      ? INGEST_EXIT.usage
      : INGEST_EXIT.failed;
  } finally {
    process.off('SIGINT', onSigint);
    await target?.close().catch(() => undefined);
  }
}

function targetLabel(flags: Flags): string {
  try {
    const u = new URL(flags.to);
    const where = `${u.protocol}//${u.host}${u.pathname === '/' ? '' : u.pathname}`;
    if (flags.table) return `${where} ${flags.table}`;
    if (flags.topic) return `${where} ${flags.topic}`;
    return where;
  } catch {
    return flags.to;
  }
}

function jsonRow(r: Row): unknown {
  // fromEntries makes every name an own property (`out['__proto__'] = …` would drop the column).
  return Object.fromEntries(Object.entries(r).map(([k, v]) => [k, v instanceof Date ? v.toISOString() : v]));
}

async function writeSummary(path: string, report: unknown): Promise<void> {
  await writeFile(path, `${JSON.stringify(report, null, 2)}\n`);
}

function summaryText(
  s: IngestSummary,
  target: string,
  rejectsPath: string,
  problem: string | undefined,
): string {
  const secs = (s.durationMs / 1000).toFixed(1);
  const lines = [
    problem === undefined ? `Ingested ${s.source} into ${target}` : `Stopped: ${problem}`,
    `  rows read      ${s.rowsRead}`,
    `  rows written   ${s.rowsWritten}${s.durable ? ' (durable)' : ` (${s.rowsPending} not confirmed durable)`}`,
    `  rows rejected  ${s.rowsRejected}${s.rowsDeadLettered > 0 ? `, ${s.rowsDeadLettered} refused by the store` : ''}`,
    `  bytes          ${s.bytesRead}`,
    `  time           ${secs} s, ${s.rowsPerSecond} rows/s`,
  ];
  if (s.rowsRejected + s.rowsDeadLettered > 0) {
    const reasons = Object.entries(s.rejectsByReason)
      .map(([r, n]) => `${r} ${n}`)
      .join(', ');
    lines.push(`  reasons        ${reasons || 'store'}`, `  reject file    ${rejectsPath}`);
    for (const r of s.firstRejects.slice(0, 5))
      lines.push(`    line ${r.line}${r.column ? `, ${r.column}` : ''}: ${r.reason} (${r.message})`);
  }
  return `${lines.join('\n')}\n`;
}
