import {
  booleanOption,
  choiceOption,
  countOption,
  functionOption,
  invalidOption,
  knownOptions,
  nonNegativeOption,
} from '@spillway/core/kit';
import { type ColumnSpec, type ResolvedColumn, type Row, resolveColumns } from './columns.js';
import type { CsvLine } from './csv-line.js';
import type { CsvRun } from './csv-run.js';
import type { RejectTarget } from './reject.js';
import { RejectFile, type RejectFormat } from './reject-file.js';
import { isStandardSchema, type StandardSchemaV1 } from './standard-schema.js';

export type IngestFormat = 'csv' | 'ndjson';

/** Where a row came from, passed to `map`. */
export interface RowContext {
  /** Physical line (1-based) where the row starts. */
  readonly line: number;
  readonly source: string;
}

/** Counts so far, passed to `onProgress`. */
export interface IngestProgress {
  readonly rowsRead: number;
  readonly rowsWritten: number;
  readonly rowsRejected: number;
  readonly rowsDeadLettered: number;
  readonly bytesRead: number;
  /** The input's size when known (a file), for an ETA. */
  readonly totalBytes: number | undefined;
  readonly elapsedMs: number;
}

export interface IngestOptions<T = Row> {
  /**
   * Input format. `ingestFile` takes it from the extension when not given (`.csv`, `.tsv`,
   * `.ndjson`, `.jsonl`).
   * @default from the file extension; required for streams
   * @example 'ndjson'
   */
  format?: IngestFormat;
  /**
   * CSV: the first record holds the column names. With `false`, `columns` are read by position.
   * @default true
   */
  header?: boolean;
  /**
   * CSV field delimiter, one ASCII character.
   * @default ',' (or a tab for `.tsv` files)
   * @example ';'
   */
  delimiter?: string;
  /**
   * Declared columns: which to read, their types and rules. Rows that fail go to the reject target.
   * Without `columns` (and without `schema`) a CSV row is every header column as text, an NDJSON
   * row the object as it came.
   * @default undefined
   * @example [{ name: 'dock_id', type: 'string', required: true, pattern: '^DK-\\d{4}$' }, { name: 'odometer_km', type: 'integer', min: 0 }]
   */
  columns?: readonly ColumnSpec[];
  /**
   * Any Standard Schema validator (zod 4, valibot, arktype, …), run after `columns`; its output
   * is the row. Issues reject the row with reason `schema` and the issue's path as the column.
   * @default undefined
   * @example z.object({ dock_id: z.string().regex(/^DK-\d{4}$/), odometer_km: z.coerce.number().int() })
   */
  schema?: StandardSchemaV1;
  /**
   * Turns a valid row into the sink's record. A throw rejects the row with reason `map`.
   * @default the row itself
   * @example (row, { line }) => ({ ...row, source_line: line })
   */
  map?: (row: Row, context: RowContext) => T;
  /**
   * CSV with the `,` delimiter: a row that passes every check, and whose values would be written
   * exactly as the file spells them, goes to the sink as `asCsvLine(line)` instead of as a row
   * object: its bytes as a COPY (FORMAT csv) line, for a sink that reads CSV itself (a PostgreSQL
   * sink in `copy` mode with its `csvLine` option). NDJSON with `columns` (none of type `json`):
   * each valid row, once built, is written as such a line. Other rows are row objects as usual,
   * so the sink takes both. `line.row()` gives the row a line stands for. Not with `map` or
   * `schema`, which need row objects.
   * @default undefined (every row is a row object)
   * @example (line) => line
   */
  asCsvLine?: (line: CsvLine) => T;
  /**
   * With `asCsvLine`: consecutive rows that would each go as their line, and lie next to each
   * other in the input separated by a bare LF (NDJSON: any consecutive such rows, blank lines
   * between them too), go to the sink as one record, `asCsvRun(run)`:
   * several COPY lines in one buffer, so the sink's per-record work is done once per run. A run
   * ends at a row that does not go as its line, a CRLF or blank line, and every 16 KiB of input.
   * The sink's dead-letter target must give a `CsvRun` it receives back with `run.isolate()`
   * (`RejectFile.deadLetterTarget()` does): the rows are then written again one row per record,
   * so a row the store refuses is isolated with its own line and the others land. Sink metrics
   * count records (runs); the summary and progress count rows.
   * @default undefined (every row is its own record)
   * @example (run) => run
   */
  asCsvRun?: (run: CsvRun) => T;
  /**
   * Where rejected rows go: a path (a `RejectFile`, created 0600, format from the extension:
   * `.csv` → CSV, anything else → NDJSON) or any `RejectTarget`. Without one, rejects are only
   * counted (and the first 20 listed in the summary).
   * @default undefined
   * @example '/var/lib/tandem/rejects/partner-42.ndjson'
   */
  rejects?: string | RejectTarget;
  /**
   * Format of a reject file given by path.
   * @default from the extension (`.csv` → 'csv', else 'ndjson')
   */
  rejectFormat?: RejectFormat;
  /**
   * Stop the upload when more than this many rows are rejected (`IngestError` reason
   * `reject-limit`). Rows written before the stop stay written. 0 stops at the first reject.
   * @default Infinity
   * @example 100
   */
  maxRejects?: number;
  /**
   * Longest NDJSON line / CSV record, in bytes, without its line break. A longer one is rejected
   * (`too-long`) with only its first bytes kept; reading resumes after its end (for CSV the first
   * line break outside quotes: the limit never decides where a record ends).
   * @default 1048576 (1 MiB)
   */
  maxRowBytes?: number;
  /**
   * Stop when the input passes this many bytes (`IngestError` reason `too-large`).
   * @default Infinity
   * @example 64 * 1024 * 1024
   */
  maxInputBytes?: number;
  /**
   * NDJSON blank lines (only whitespace): `skip` counts them in `blankLines`, `reject` rejects
   * them (reason `blank`). jsonlines.org has no blank lines; many writers end files with one.
   * CSV blank lines are always skipped and counted.
   * @default 'skip'
   */
  blankLines?: 'skip' | 'reject';
  /**
   * Name rows carry as `meta.topic` (so dead letters say where a row came from) and the summary's `source`.
   * @default the file's base name, or 'stream'
   * @example 'partner-42/2024-05-01.csv'
   */
  sourceName?: string;
  /** Stops the ingest (reason `read`) when aborted. */
  signal?: AbortSignal;
  /**
   * Called with the counts so far, at most every `progressIntervalMs`, and once at the end.
   * @default undefined
   */
  onProgress?: (progress: IngestProgress) => void;
  /**
   * Least time between two `onProgress` calls, ms.
   * @default 1000
   */
  progressIntervalMs?: number;
}

export interface ResolvedIngestOptions<T> {
  format: IngestFormat | undefined;
  header: boolean;
  delimiter: number;
  columns: ResolvedColumn[] | undefined;
  schema: StandardSchemaV1 | undefined;
  map: ((row: Row, context: RowContext) => T) | undefined;
  asCsvLine: ((line: CsvLine) => T) | undefined;
  asCsvRun: ((run: CsvRun) => T) | undefined;
  rejects: RejectTarget | undefined;
  /** True when the ingest opened the reject target and so closes it. */
  ownsRejects: boolean;
  maxRejects: number;
  maxRowBytes: number;
  maxInputBytes: number;
  blankLines: 'skip' | 'reject';
  sourceName: string | undefined;
  signal: AbortSignal | undefined;
  onProgress: ((progress: IngestProgress) => void) | undefined;
  progressIntervalMs: number;
}

const KNOWN = new Set([
  'format',
  'header',
  'delimiter',
  'columns',
  'schema',
  'map',
  'asCsvLine',
  'asCsvRun',
  'rejects',
  'rejectFormat',
  'maxRejects',
  'maxRowBytes',
  'maxInputBytes',
  'blankLines',
  'sourceName',
  'signal',
  'onProgress',
  'progressIntervalMs',
]);

export const INGEST_DEFAULTS = { maxRowBytes: 1024 * 1024, progressIntervalMs: 1000 } as const;

/** Applies defaults and validates; throws a `TypeError` (code `SPILLWAY_INVALID_OPTION`) naming the first bad option. */
export function resolveIngestOptions<T>(options: IngestOptions<T> | undefined): ResolvedIngestOptions<T> {
  const o = knownOptions(options, KNOWN);
  const format =
    o.format === undefined
      ? undefined
      : choiceOption<IngestFormat>('format', o.format, ['csv', 'ndjson'], 'csv');
  const header = booleanOption('header', o.header, true);
  const delimiter = o.delimiter ?? ',';
  if (
    typeof delimiter !== 'string' ||
    delimiter.length !== 1 ||
    delimiter.charCodeAt(0) > 0x7f ||
    /["\r\n]/.test(delimiter)
  ) {
    throw invalidOption('delimiter', 'one ASCII character other than a quote or a line break', o.delimiter);
  }
  const columns = o.columns === undefined ? undefined : resolveColumns(o.columns);
  if (o.schema !== undefined && !isStandardSchema(o.schema))
    throw invalidOption(
      'schema',
      'a Standard Schema validator (an object with ~standard.validate)',
      o.schema,
    );
  const map = functionOption<(row: Row, context: RowContext) => T>('map', o.map);
  const asCsvLine = functionOption<(line: CsvLine) => T>('asCsvLine', o.asCsvLine);
  if (asCsvLine !== undefined && (map !== undefined || o.schema !== undefined))
    throw invalidOption(
      'asCsvLine',
      'undefined when `map` or `schema` is given (they need row objects)',
      o.asCsvLine,
    );
  const asCsvRun = functionOption<(run: CsvRun) => T>('asCsvRun', o.asCsvRun);
  if (asCsvRun !== undefined && asCsvLine === undefined)
    throw invalidOption(
      'asCsvRun',
      'undefined unless `asCsvLine` is given (the rows of a refused run go as lines)',
      o.asCsvRun,
    );
  if (!header && columns === undefined)
    throw invalidOption(
      'columns',
      'column specs when `header` is false (CSV columns are then read by position)',
      o.columns,
    );
  const rejectFormat =
    o.rejectFormat === undefined
      ? undefined
      : choiceOption<RejectFormat>('rejectFormat', o.rejectFormat, ['ndjson', 'csv'], 'ndjson');
  let rejects: RejectTarget | undefined;
  let ownsRejects = false;
  if (typeof o.rejects === 'string') {
    if (o.rejects.length === 0)
      throw invalidOption('rejects', 'a non-empty path or a RejectTarget', o.rejects);
    rejects = new RejectFile(o.rejects, rejectFormat);
    ownsRejects = true;
  } else if (o.rejects !== undefined) {
    const t = o.rejects as RejectTarget;
    if (typeof t !== 'object' || t === null || typeof t.write !== 'function')
      throw invalidOption('rejects', 'a path or an object with write(reject)', o.rejects);
    rejects = t;
  }
  const blankLines = choiceOption('blankLines', o.blankLines, ['skip', 'reject'] as const, 'skip');
  if (o.sourceName !== undefined && (typeof o.sourceName !== 'string' || o.sourceName.length === 0))
    throw invalidOption('sourceName', 'a non-empty string', o.sourceName);
  if (o.signal !== undefined && !(o.signal instanceof AbortSignal))
    throw invalidOption('signal', 'an AbortSignal', o.signal);
  const onProgress = functionOption<(p: IngestProgress) => void>('onProgress', o.onProgress);
  const progressIntervalMs = nonNegativeOption(
    'progressIntervalMs',
    o.progressIntervalMs,
    INGEST_DEFAULTS.progressIntervalMs,
  );
  return {
    format,
    header,
    delimiter: delimiter.charCodeAt(0),
    columns,
    schema: o.schema as StandardSchemaV1 | undefined,
    map,
    asCsvLine,
    asCsvRun,
    rejects,
    ownsRejects,
    maxRejects: countOption('maxRejects', o.maxRejects, Number.POSITIVE_INFINITY, {
      min: 0,
      allowInfinity: true,
    }),
    maxRowBytes: countOption('maxRowBytes', o.maxRowBytes, INGEST_DEFAULTS.maxRowBytes),
    maxInputBytes: countOption('maxInputBytes', o.maxInputBytes, Number.POSITIVE_INFINITY, {
      allowInfinity: true,
    }),
    blankLines,
    sourceName: o.sourceName as string | undefined,
    signal: o.signal as AbortSignal | undefined,
    onProgress,
    progressIntervalMs,
  };
}
