// The user's sample file, read by @spillway/ingest's CSV and NDJSON readers (format from the
// extension), and the timestamps a `replay` follows. Every tune on the user's own store reads its
// records through here; a malformed line stops with an error naming the line.
import { basename } from 'node:path';
import { type Batch, type ErrorClass, Sink, type SinkAdapter, SpillwayError } from '@spillway/core';
import { formatFromPath, IngestError, ingestFile, type Row } from '@spillway/ingest';

export const inputError = (message: string, details: Record<string, unknown> = {}) =>
  new SpillwayError('SPILLWAY_INPUT_ERROR', message, { details });

/** Collects what the ingest readers hand over. */
class Collect implements SinkAdapter<Row> {
  readonly kind = 'sample';
  readonly rows: Row[] = [];
  async write(batch: Batch<Row>): Promise<void> {
    for (const r of batch.records) this.rows.push(r);
  }
  classify(): ErrorClass {
    return 'fatal';
  }
}

export interface SampleFile {
  format: 'csv' | 'ndjson';
  rows: Row[];
  /** Field names of the first 1,000 rows, in order of appearance. */
  fields: string[];
}

/** Reads the whole sample into memory (.csv, .tsv, .ndjson, .jsonl). */
export async function readSample(path: string): Promise<SampleFile> {
  const format = formatFromPath(path);
  if (!format)
    throw inputError(
      `--sample ${basename(path)}: expected a .csv, .tsv, .ndjson or .jsonl file (the format is told by the extension)`,
      { sample: path },
    );
  const collect = new Collect();
  const sink = new Sink(collect, { name: 'sample', maxRecords: 10_000, maxAgeMs: 1000, idleMs: 0 });
  try {
    await ingestFile(path, sink, { maxRejects: 0 });
  } catch (error) {
    if (error instanceof IngestError) {
      const first = error.summary.firstRejects[0];
      const where = first
        ? `line ${first.line}${first.column ? `, column ${first.column}` : ''}: ${first.message}`
        : error.message;
      throw inputError(`--sample ${basename(path)}: ${where}`, { sample: path, line: first?.line });
    }
    throw inputError(`--sample ${basename(path)}: ${(error as Error).message}`, { sample: path });
  } finally {
    await sink.close().catch(() => undefined);
  }
  const rows = collect.rows;
  if (rows.length === 0)
    throw inputError(`--sample ${basename(path)}: the file holds no rows`, { sample: path });
  const fields = new Set<string>();
  for (const r of rows.slice(0, 1000)) for (const k of Object.keys(r)) fields.add(k);
  return { format, rows, fields: [...fields] };
}

/**
 * The rows' order by the timestamp field `column` (ties keep file order) and each row's offset in
 * ms from the first, in that order. Throws naming the first row without a timestamp.
 */
export function timeOrder(rows: Row[], column: string, path: string): { order: number[]; timesMs: number[] } {
  const stamps = rows.map((r, i) => {
    const t = timestampMs(r[column]);
    if (t === undefined)
      throw inputError(
        `--sample ${basename(path)}: row ${i + 1} has no timestamp in "${column}" (--timestamp-column wants RFC 3339 text or epoch milliseconds)`,
        { sample: path, row: i + 1, column },
      );
    return t;
  });
  const order = stamps.map((_, i) => i).sort((a, b) => stamps[a]! - stamps[b]! || a - b);
  const t0 = stamps[order[0]!]!;
  return { order, timesMs: order.map((i) => stamps[i]! - t0) };
}

function timestampMs(v: unknown): number | undefined {
  if (typeof v === 'number' && Number.isFinite(v)) return v;
  if (typeof v !== 'string' || v.trim() === '') return undefined;
  if (/^\d+(\.\d+)?$/.test(v.trim())) return Number(v);
  const t = Date.parse(v);
  return Number.isNaN(t) ? undefined : t;
}
