import { createReadStream } from 'node:fs';
import { stat } from 'node:fs/promises';
import { basename, extname } from 'node:path';
import type { Readable } from 'node:stream';
import { messageOf, type Sink, SpillwayError } from '@spillway/core';
import { invalidOption } from '@spillway/core/kit';
import { convert, isAbsent, isMissing, type ResolvedColumn, type Row } from './columns.js';
import { splitRecords } from './csv-fields.js';
import {
  CsvLine,
  checkInOrder,
  EMPTY_FIELD,
  type LineLayout,
  NOT_A_LINE,
  plainCheck,
  quoteEmptyFields,
  scanLine,
} from './csv-line.js';
import { CsvRun } from './csv-run.js';
import { IngestError, type IngestStopReason } from './errors.js';
import { JsonRun, JsonRunBuilder, linesFit } from './json-run.js';
import { LineRun } from './line-run.js';
import {
  type IngestFormat,
  type IngestOptions,
  type IngestProgress,
  resolveIngestOptions,
} from './options.js';
import type { Reject, RejectReason } from './reject.js';
import { csvReader, type Item, type ItemReader, ndjsonReader } from './rows.js';
import { type IngestMeta, trackRun } from './run-counts.js';
import { issuePath, type StandardResult } from './standard-schema.js';
import { FIRST_REJECTS, type IngestSummary, type RejectNote } from './summary.js';

/** Bytes to read from: a Node stream (file, HTTP request body) or any async iterable of chunks. */
export type IngestInput = Readable | AsyncIterable<Uint8Array | string>;

let runs = 0;

const COMMA = 0x2c;
/** Bytes of input parsed at a time (see the read loop). */
const READ_SLICE = 16 * 1024;

/** The format a file name implies, if any. */
export function formatFromPath(path: string): IngestFormat | undefined {
  const ext = extname(path).toLowerCase();
  if (ext === '.csv' || ext === '.tsv') return 'csv';
  if (ext === '.ndjson' || ext === '.jsonl') return 'ndjson';
  return undefined;
}

/**
 * Reads a file into a sink. Same as `ingest()`, with the format taken from the extension, the
 * file's base name as `sourceName`, and its size for progress ETAs. Memory stays bounded by the
 * sink's pending bounds and `maxRowBytes`, whatever the file's size.
 */
export async function ingestFile<T>(
  path: string,
  sink: Sink<T>,
  options: IngestOptions<T> = {},
): Promise<IngestSummary> {
  const format = options.format ?? formatFromPath(path);
  const delimiter = options.delimiter ?? (extname(path).toLowerCase() === '.tsv' ? '\t' : undefined);
  const totalBytes = (await stat(path)).size;
  const stream = createReadStream(path, { highWaterMark: 256 * 1024 });
  try {
    return await run(
      stream,
      sink,
      {
        ...options,
        ...(format && { format }),
        ...(delimiter && { delimiter }),
        sourceName: options.sourceName ?? basename(path),
      },
      totalBytes,
    );
  } finally {
    stream.destroy();
  }
}

/**
 * Reads CSV or NDJSON from a stream into a sink, with the sink's backpressure: rows are parsed,
 * validated and written one by one, bad rows go to the reject target with their line, column
 * and reason, and the summary comes only after `sink.flush()` resolved — every row counted as
 * written is durable. Stops early with an `IngestError` (whose `summary` counts what was done).
 *
 * Rows carry `meta = { topic: sourceName, partition: <run id>, offset: <line>, externalProgress:
 * true }`: one upload is one ordering key, so its rows reach the store in file order (a later row
 * for the same key wins in an upsert); the summary counts them, not the sink's progress tracker.
 * The input is not destroyed on an early stop: the caller owns it (an HTTP server answers first).
 */
export function ingest<T>(
  input: IngestInput,
  sink: Sink<T>,
  options: IngestOptions<T> = {},
): Promise<IngestSummary> {
  return run(input, sink, options, undefined);
}

class Stop extends Error {
  constructor(
    readonly reason: IngestStopReason,
    message: string,
    readonly origin?: unknown,
  ) {
    super(message);
  }
}

async function run<T>(
  input: IngestInput,
  sink: Sink<T>,
  options: IngestOptions<T>,
  totalBytes: number | undefined,
): Promise<IngestSummary> {
  const o = resolveIngestOptions(options);
  if (o.format === undefined) {
    throw invalidOption('format', '"csv" or "ndjson" (it cannot be told from a stream)', undefined);
  }
  const format = o.format;
  const source = o.sourceName ?? 'stream';
  const runId = `ingest-${process.pid}-${++runs}`;
  const started = performance.now();
  // Valid rows go on as their CSV text only where COPY reads the same text: comma-delimited CSV,
  // or NDJSON rows built from declared columns, written as CSV lines (json-run.ts).
  const jsonLines = format === 'ndjson' && o.columns !== undefined && linesFit(o.columns);
  const asLine = (format === 'csv' && o.delimiter === COMMA) || jsonLines ? o.asCsvLine : undefined;
  const asRun = asLine ? o.asCsvRun : undefined;
  // Text columns need no field values at all: records stay bytes after the header.
  const reader: ItemReader =
    format === 'csv'
      ? csvReader(o.delimiter, o.maxRowBytes, asLine !== undefined && !o.columns)
      : ndjsonReader(o.maxRowBytes);

  // Count this run's records as the sink settles them; other writers may share the sink.
  const run = trackRun(sink, runId, source);
  const settled = run.counts;
  const s = {
    rowsRead: 0,
    accepted: 0,
    rejected: 0,
    blank: 0,
    bytes: 0,
    byReason: {} as Partial<Record<RejectReason, number>>,
    first: [] as RejectNote[],
  };

  const summary = (stopped: string | undefined): IngestSummary => {
    const durationMs = performance.now() - started;
    return {
      source,
      format,
      rowsRead: s.rowsRead,
      rowsWritten: settled.written,
      rowsRejected: s.rejected,
      rowsDeadLettered: settled.deadLettered,
      rowsPending: s.accepted - settled.written - settled.deadLettered,
      blankLines: format === 'csv' ? reader.blankLines : s.blank,
      bytesRead: s.bytes,
      durationMs: Math.round(durationMs * 10) / 10,
      rowsPerSecond: durationMs > 0 ? Math.round((s.rowsRead / durationMs) * 1000) : 0,
      durable: s.accepted === settled.written + settled.deadLettered,
      lastLine: reader.lastLine,
      rejectsByReason: { ...s.byReason },
      firstRejects: [...s.first],
      stopped,
    };
  };

  let lastProgress = started;
  const progress = (force: boolean) => {
    if (!o.onProgress) return;
    const now = performance.now();
    if (!force && now - lastProgress < o.progressIntervalMs) return;
    lastProgress = now;
    const p: IngestProgress = {
      rowsRead: s.rowsRead,
      rowsWritten: settled.written,
      rowsRejected: s.rejected,
      rowsDeadLettered: settled.deadLettered,
      bytesRead: s.bytes,
      totalBytes,
      elapsedMs: now - started,
    };
    o.onProgress(p);
  };

  const reject = async (
    line: number,
    raw: Uint8Array,
    reason: RejectReason,
    message: string,
    column: string | undefined,
    truncated = false,
  ) => {
    const wait = endRun();
    if (wait) await wait;
    s.rejected++;
    s.byReason[reason] = (s.byReason[reason] ?? 0) + 1;
    if (s.first.length < FIRST_REJECTS) s.first.push({ line, column, reason, message });
    if (o.rejects) {
      const r: Reject = { line, column, reason, message, raw, truncated };
      try {
        await o.rejects.write(r);
      } catch (error) {
        throw new Stop('rejects', `Could not write a reject: ${messageOf(error)}`, error);
      }
    }
    if (s.rejected > o.maxRejects)
      throw new Stop('reject-limit', `More than ${o.maxRejects} row(s) rejected; stopped at line ${line}`);
  };

  const writeOptions = o.signal ? { signal: o.signal } : undefined;
  const sinkFailed = (error: unknown): Stop =>
    o.signal?.aborted
      ? new Stop('read', 'The ingest was aborted', o.signal.reason)
      : new Stop('sink', `The sink refused a row: ${messageOf(error)}`, error);
  // The summary counts settlements itself: the sink's progress tracker need not follow them.
  const metaOf = (line: number, rows = 1): IngestMeta => ({
    topic: source,
    partition: runId,
    offset: line,
    externalProgress: true,
    ...(rows !== 1 && { rows }),
  });
  // Synchronous while the sink has room: a promise per record would cost more than the record.
  // `again`: a row of a refused run, written again; read before any abort, it is not aborted.
  const accept = (record: T, meta: IngestMeta, again = false): Promise<void> | undefined => {
    const rows = meta.rows ?? 1;
    let taken: boolean;
    try {
      taken = sink.tryWrite(record, meta);
    } catch (error) {
      throw sinkFailed(error);
    }
    if (taken) {
      s.accepted += rows;
      return undefined;
    }
    return sink.write(record, meta, again ? undefined : writeOptions).then(
      () => {
        s.accepted += rows;
      },
      (error: unknown) => {
        throw sinkFailed(error);
      },
    );
  };

  // The run of rows being gathered (`asCsvRun`).
  const gathered = new LineRun();
  const runMetas = new WeakMap<CsvRun, IngestMeta>();
  /** Runs a store refused, whose rows are to be written again one by one. */
  const handedBack: CsvRun[] = [];
  let ended = false;
  const owner = {
    resubmit(r: CsvRun): boolean {
      const meta = runMetas.get(r);
      if (ended || meta === undefined || meta.isolated) return false;
      // Its settlement is not counted; its rows are, when they settle one by one.
      meta.isolated = true;
      s.accepted -= r.count;
      handedBack.push(r);
      return true;
    },
  };

  // NDJSON rows encoded as CSV lines (`jsonLines`), gathered the same way.
  const encoded = jsonLines && asLine ? new JsonRunBuilder(o.columns!) : undefined;

  /** Hands the run gathered so far to the sink. */
  const endRun = (): Promise<void> | undefined => {
    if (encoded) {
      const e = encoded.take();
      return e === undefined ? undefined : acceptRun(e.bytes, e.lines[0]!, e.lines.length, e.lines);
    }
    const g = gathered.take();
    return g === undefined ? undefined : acceptRun(g.bytes, g.line, g.rows);
  };

  /** Rows that go as their lines, LF between them, as one record (one row: its line). */
  const acceptRun = (
    bytes: Buffer,
    line: number,
    rows: number,
    rowLines?: number[],
  ): Promise<void> | undefined => {
    if (rows === 1) return accept(asLine!(new CsvLine(bytes, layout!)), metaOf(line));
    const r = rowLines
      ? new JsonRun(bytes, rowLines, layout!, owner)
      : new CsvRun(bytes, line, rows, layout!, owner);
    const meta = metaOf(line, rows);
    runMetas.set(r, meta);
    return accept(asRun!(r), meta);
  };

  /** A row that goes as its line: into the current run when its bytes follow the run's after an LF. */
  const sendLine = (bytes: Buffer, line: number): Promise<void> | undefined => {
    if (!asRun) return accept(asLine!(new CsvLine(bytes, layout!)), metaOf(line));
    if (gathered.join(bytes)) return undefined;
    const wait = endRun();
    gathered.start(bytes, line);
    return wait;
  };

  /** A row object, or a row refused: after the run gathered so far, which holds earlier rows. */
  const acceptRow = (record: T, line: number): Promise<void> | undefined => {
    const wait = endRun();
    if (wait) return wait.then(() => accept(record, metaOf(line)));
    return accept(record, metaOf(line));
  };

  /** Rows of `handedBack[0]` written again so far. */
  let rewritten = 0;
  /** Writes the rows of refused runs again, one row per record. */
  const rewrite = async (): Promise<void> => {
    while (handedBack.length > 0) {
      const lines = handedBack[0]!.lines();
      for (; rewritten < lines.length; rewritten++) {
        const { line, csv } = lines[rewritten]!;
        const wait = accept(asLine!(csv), metaOf(line), true);
        if (wait) await wait;
      }
      handedBack.shift();
      rewritten = 0;
    }
  };

  let header: HeaderMap | undefined = format === 'csv' && !o.header ? positional(o.columns!) : undefined;
  const needHeader = format === 'csv' && o.header;
  let layout: LineLayout | undefined =
    header && asLine
      ? lineLayout(header, o.delimiter)
      : encoded
        ? lineLayout(positional(o.columns!), COMMA)
        : undefined;
  /** Once the columns are known: runs of plain rows from the reader, where they can go as lines. */
  const frameRuns = (h: HeaderMap) => {
    if (!asRun || !reader.frameRuns) return;
    if (!h.columns) reader.frameRuns(h.width);
    else if (h.inOrder) {
      const check = plainCheck(h.columns);
      if (check) reader.frameRuns(h.width, check);
    }
  };
  if (header) frameRuns(header);

  /** Handles one item; returns a promise only when it has to wait (a full sink, a reject target, an async schema). */
  const handle = (item: Item): Promise<void> | undefined => {
    if (item.kind === 'blank') {
      if (o.blankLines === 'reject') {
        s.rowsRead++;
        return reject(item.line, Buffer.alloc(0), 'blank', 'a blank line', undefined);
      }
      s.blank++;
      return undefined;
    }
    if (needHeader && header === undefined) {
      if (item.kind !== 'fields')
        throw new Stop(
          'header',
          `The CSV header (line ${item.line}) is malformed: ${item.kind === 'reject' ? item.message : 'no fields'}`,
        );
      header = headerMap(item.fields, o.columns);
      if (asLine) layout = lineLayout(header, o.delimiter);
      frameRuns(header);
      return undefined;
    }
    if (item.kind === 'run') {
      // Plain rows of the header's width, found by the reader: valid as they are.
      s.rowsRead += item.count;
      const wait = endRun();
      if (wait) return wait.then(() => acceptRun(item.raw, item.line, item.count));
      return acceptRun(item.raw, item.line, item.count);
    }
    s.rowsRead++;
    if (item.kind === 'reject') {
      const column =
        item.field === undefined ? undefined : (header?.names[item.field] ?? `#${item.field + 1}`);
      return reject(item.line, item.raw, item.reason, item.message, column, item.truncated);
    }
    let row: Row;
    if (item.kind === 'line') {
      // Text columns, the record still bytes: count its fields without splitting it.
      const h = header!;
      const scan = scanLine(item.raw, o.delimiter);
      const width = scan >>> 2;
      if (width !== h.width)
        return reject(
          item.line,
          item.raw,
          'column-count',
          `expected ${h.width} field(s), got ${width}`,
          undefined,
        );
      if ((scan & NOT_A_LINE) === 0) {
        const bytes = scan & EMPTY_FIELD ? quoteEmptyFields(item.raw, o.delimiter, width) : item.raw;
        return sendLine(bytes, item.line);
      }
      row = fromHeader(h.names, splitOne(item.raw, o.delimiter)).row;
    } else if (item.kind === 'fields') {
      const h = header!;
      if (item.fields.length !== h.width) {
        return reject(
          item.line,
          item.raw,
          'column-count',
          `expected ${h.width} field(s), got ${item.fields.length}`,
          undefined,
        );
      }
      if (asLine && h.inOrder) {
        const verdict = checkInOrder(h.columns!, item.fields, item.raw, o.delimiter);
        if (verdict === undefined) return sendLine(item.raw, item.line);
        if (verdict !== 'convert')
          return reject(item.line, item.raw, verdict.reason, verdict.message, verdict.column);
      }
      const built = o.columns
        ? fromColumns(h.columns!, (c) => item.fields[h.index.get(c.name)!])
        : fromHeader(h.names, item.fields);
      if ('reason' in built) return reject(item.line, item.raw, built.reason, built.message, built.column);
      row = built.row;
    } else {
      const v = item.value;
      if (typeof v !== 'object' || v === null || Array.isArray(v)) {
        return reject(
          item.line,
          item.raw,
          'not-object',
          `expected a JSON object, got ${v === null ? 'null' : Array.isArray(v) ? 'an array' : `a ${typeof v}`}`,
          undefined,
        );
      }
      const obj = v as Record<string, unknown>;
      if (o.columns) {
        // Own properties only: a missing `constructor` must not read Object's.
        const built = fromColumns(
          o.columns,
          (c) => (Object.hasOwn(obj, c.from) ? obj[c.from] : undefined),
          isAbsent,
        );
        if ('reason' in built) return reject(item.line, item.raw, built.reason, built.message, built.column);
        if (encoded?.add(built.row, item.line)) {
          // Without runs, the row goes at once, as its line.
          return asRun ? undefined : endRun();
        }
        row = built.row;
      } else row = obj;
    }
    if (o.schema) {
      const result = o.schema['~standard'].validate(row);
      if (result instanceof Promise) return result.then((r) => validated(item, r));
      return validated(item, result);
    }
    return mapped(item, row);
  };

  const validated = (
    item: Item & { kind: 'fields' | 'line' | 'value' },
    result: StandardResult<unknown>,
  ): Promise<void> | undefined => {
    if (result.issues) {
      const issue = result.issues[0];
      return reject(
        item.line,
        item.raw,
        'schema',
        issue?.message ?? 'schema validation failed',
        issue ? issuePath(issue) : undefined,
      );
    }
    return mapped(item, result.value as Row);
  };

  const mapped = (
    item: Item & { kind: 'fields' | 'line' | 'value' },
    row: Row,
  ): Promise<void> | undefined => {
    let record: T;
    if (o.map) {
      try {
        record = o.map(row, { line: item.line, source });
      } catch (error) {
        return reject(item.line, item.raw, 'map', messageOf(error), undefined);
      }
    } else record = row as T;
    return acceptRow(record, item.line);
  };

  let stop: Stop | undefined;
  try {
    for await (const chunk of chunks(input)) {
      if (o.signal?.aborted) throw new Stop('read', 'The ingest was aborted', o.signal.reason);
      s.bytes += chunk.length;
      if (s.bytes > o.maxInputBytes)
        throw new Stop('too-large', `The input is larger than ${o.maxInputBytes} bytes`);
      // In slices: the rows parsed from one slice wait together while the sink is full, so the
      // slice, not the chunk a stream happens to deliver, bounds what an upload holds meanwhile.
      for (let at = 0; at < chunk.length; at += READ_SLICE) {
        const slice = at === 0 && chunk.length <= READ_SLICE ? chunk : chunk.subarray(at, at + READ_SLICE);
        for (const item of reader.push(slice)) {
          const wait = handle(item);
          if (wait) await wait;
        }
        const wait = endRun();
        if (wait) await wait;
        if (handedBack.length > 0) await rewrite();
      }
      progress(false);
    }
    for (const item of reader.end()) {
      const wait = handle(item);
      if (wait) await wait;
    }
    const wait = endRun();
    if (wait) await wait;
  } catch (error) {
    stop =
      error instanceof Stop
        ? error
        : new Stop('read', `Reading the input failed: ${messageOf(error)}`, error);
  }

  // The last partial batch leaves now, not when more data would have come; and the summary
  // waits until every row handed over is terminal.
  // The rows of a run the store refused come back while it settles: written again, and waited for.
  let sinkError: unknown;
  if (!(stop?.reason === 'sink')) {
    try {
      await sink.flush();
      while (handedBack.length > 0) {
        await rewrite();
        await sink.flush();
      }
    } catch (error) {
      if (error instanceof Stop) stop ??= error;
      else sinkError = error;
    }
  }
  ended = true;
  // Rows of refused runs the sink could not take again (it failed, or the upload stopped with it):
  // refused by the store, each with its own line.
  try {
    for (const r of handedBack.splice(0)) {
      const left = r.lines().slice(rewritten);
      rewritten = 0;
      s.accepted += left.length;
      settled.deadLettered += left.length;
      for (const { line, csv } of left) {
        await o.rejects?.write({
          line,
          column: undefined,
          reason: 'store',
          message: 'refused by the store with the rows around it, and not written again: the upload stopped',
          raw: csv.bytes,
          truncated: false,
        });
      }
    }
  } catch (error) {
    stop ??= new Stop('rejects', `Could not write a reject: ${messageOf(error)}`, error);
  }
  run.release();
  if (o.ownsRejects) {
    try {
      await o.rejects?.close?.();
    } catch (error) {
      stop ??= new Stop('rejects', `Could not close the reject file: ${messageOf(error)}`, error);
    }
  }
  progress(true);
  if (sinkError !== undefined && !stop)
    stop = new Stop('sink', `The sink failed: ${messageOf(sinkError)}`, sinkError);
  if (stop) {
    const done = summary(stop.reason);
    throw new IngestError(stop.reason, stop.message, done, stop.origin);
  }
  return summary(undefined);
}

/** Column positions of a CSV. */
interface HeaderMap {
  names: string[];
  width: number;
  columns: ResolvedColumn[] | undefined;
  /** Column spec name → field index. */
  index: Map<string, number>;
  /** The declared columns are the record's fields one to one, in order. */
  inOrder: boolean;
}

function positional(columns: ResolvedColumn[]): HeaderMap {
  return {
    names: columns.map((c) => c.name),
    width: columns.length,
    columns,
    index: new Map(columns.map((c, i) => [c.name, i])),
    inOrder: true,
  };
}

function headerMap(names: string[], columns: ResolvedColumn[] | undefined): HeaderMap {
  const seen = new Map<string, number>();
  names.forEach((n, i) => {
    if (seen.has(n)) throw new Stop('header', `The CSV header names column "${n}" twice`);
    seen.set(n, i);
  });
  if (!columns) return { names, width: names.length, columns: undefined, index: seen, inOrder: false };
  const index = new Map<string, number>();
  const missing: string[] = [];
  const present: ResolvedColumn[] = [];
  for (const c of columns) {
    const i = seen.get(c.from);
    if (i === undefined) {
      if (c.required) missing.push(c.from);
      continue;
    }
    index.set(c.name, i);
    present.push(c);
  }
  if (missing.length > 0)
    throw new Stop('header', `The CSV header lacks required column(s): ${missing.join(', ')}`);
  // Optional columns absent from the header are null in every row.
  const absent = columns.filter((c) => !index.has(c.name));
  const inOrder = columns.length === names.length && columns.every((c, i) => index.get(c.name) === i);
  return { names, width: names.length, columns: [...present, ...absent], index, inOrder };
}

/** How a `CsvLine` of this CSV turns back into its row (dead letters, other sinks). */
function lineLayout(h: HeaderMap, delimiter: number): LineLayout {
  const columns = h.columns;
  if (!columns) return { row: (bytes) => fromHeader(h.names, splitOne(bytes, delimiter)).row };
  return {
    row: (bytes) => {
      const fields = splitOne(bytes, delimiter);
      const built = fromColumns(columns, (c) => fields[h.index.get(c.name)!]);
      // A line passed every check: it always builds.
      return 'row' in built ? built.row : {};
    },
  };
}

function splitOne(bytes: Buffer, delimiter: number): string[] {
  return splitRecords(bytes.toString('utf8'), delimiter)[0] ?? [''];
}

type Built = { row: Row } | { reason: RejectReason; message: string; column: string };

/** A row of the declared columns; `missing` says which values count as missing (CSV or NDJSON rules). */
function fromColumns(
  columns: ResolvedColumn[],
  read: (c: ResolvedColumn) => unknown,
  missing: (value: unknown) => boolean = isMissing,
): Built {
  const row: Row = {};
  for (const c of columns) {
    const raw = read(c);
    if (missing(raw)) {
      if (c.required) return { reason: 'required', message: 'a required value is missing', column: c.name };
      setField(row, c.name, null);
      continue;
    }
    const v = convert(c, raw);
    if (!v.ok) return { reason: v.reason, message: v.message, column: c.name };
    setField(row, c.name, v.value);
  }
  return { row };
}

function fromHeader(names: string[], fields: string[]): { row: Row } {
  const row: Row = {};
  for (let i = 0; i < names.length; i++) setField(row, names[i]!, fields[i]);
  return { row };
}

/**
 * Sets an own property whatever the name: `row['__proto__'] = v` would set the row's prototype
 * instead, and the column would vanish (a file chooses its own column names).
 */
function setField(row: Row, name: string, value: unknown): void {
  if (name === '__proto__')
    Object.defineProperty(row, name, { value, writable: true, enumerable: true, configurable: true });
  else row[name] = value;
}

/** The input as Buffers. A Node stream is read without destroying it on an early stop. */
async function* chunks(input: IngestInput): AsyncGenerator<Buffer> {
  const readable = input as Readable & {
    iterator?: (o: { destroyOnReturn: boolean }) => AsyncIterable<unknown>;
  };
  const source: AsyncIterable<unknown> =
    typeof readable.iterator === 'function' && typeof readable.pipe === 'function'
      ? readable.iterator({ destroyOnReturn: false })
      : (input as AsyncIterable<unknown>);
  for await (const chunk of source) {
    if (typeof chunk === 'string') yield Buffer.from(chunk, 'utf8');
    else if (chunk instanceof Uint8Array)
      yield Buffer.isBuffer(chunk) ? chunk : Buffer.from(chunk.buffer, chunk.byteOffset, chunk.byteLength);
    else
      throw new SpillwayError(
        'SPILLWAY_INPUT_ERROR',
        `Expected the input to yield bytes or strings, got ${typeof chunk}`,
      );
  }
}

/**
 * The column names in the header of a CSV file (its first record), or undefined when the file is
 * empty or its first record is malformed. Reads at most `maxRowBytes` (default 1 MiB).
 */
export async function readCsvHeader(
  path: string,
  options: { delimiter?: string; maxRowBytes?: number } = {},
): Promise<string[] | undefined> {
  const delimiter = options.delimiter ?? ',';
  const o = resolveIngestOptions({
    delimiter,
    ...(options.maxRowBytes !== undefined && { maxRowBytes: options.maxRowBytes }),
  });
  const reader = csvReader(o.delimiter, o.maxRowBytes);
  const stream = createReadStream(path, { highWaterMark: 64 * 1024 });
  try {
    let read = 0;
    for await (const chunk of stream) {
      read += (chunk as Buffer).length;
      const first = reader.push(chunk as Buffer).find((i) => i.kind !== 'blank');
      if (first) return first.kind === 'fields' ? first.fields : undefined;
      if (read > o.maxRowBytes + 64 * 1024) return undefined;
    }
    const last = reader.end().find((i) => i.kind !== 'blank');
    return last?.kind === 'fields' ? last.fields : undefined;
  } finally {
    stream.destroy();
  }
}
