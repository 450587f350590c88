import { once } from 'node:events';
import { chmod, open } from 'node:fs/promises';
import type { Writable } from 'node:stream';
import {
  type DeadLetter,
  type DeadLetterTarget,
  messageOf,
  type RecordMeta,
  SpillwayError,
} from '@spillway/core';
import { CsvRun } from './csv-run.js';
import type { Reject, RejectTarget } from './reject.js';

export type RejectFormat = 'ndjson' | 'csv';

/** Header of a CSV reject file. */
export const REJECT_CSV_HEADER = 'line,column,reason,message,truncated,raw';

/**
 * Writes rejects to a file created owner-read/write only (0600): rejects hold raw rows, which may
 * carry personal data. NDJSON lines are `{"line","column","reason","message","truncated","raw"}`
 * (`rawBase64` instead of `raw` when the bytes are not UTF-8); CSV rows follow the header
 * `line,column,reason,message,truncated,raw` with RFC 4180 quoting and the raw bytes unchanged.
 */
export class RejectFile implements RejectTarget {
  private stream: Writable | undefined;
  private opening: Promise<Writable> | undefined;
  private closed = false;
  private tail: Promise<void> = Promise.resolve();
  /** Rejects written so far. */
  count = 0;

  constructor(
    readonly path: string,
    readonly format: RejectFormat = path.toLowerCase().endsWith('.csv') ? 'csv' : 'ndjson',
  ) {}

  private file(): Promise<Writable> {
    if (this.stream) return Promise.resolve(this.stream);
    this.opening ??= (async () => {
      const fh = await open(this.path, 'w', 0o600);
      // The mode above applies only when the file is created; tighten an existing one too.
      await chmod(this.path, 0o600);
      const stream = fh.createWriteStream();
      if (this.format === 'csv') stream.write(`${REJECT_CSV_HEADER}\r\n`);
      this.stream = stream;
      return stream;
    })();
    return this.opening;
  }

  write(reject: Reject): Promise<void> {
    const run = this.tail.then(async () => {
      if (this.closed) throw new SpillwayError('SPILLWAY_INPUT_ERROR', `Reject file ${this.path} is closed`);
      const stream = await this.file();
      this.count++;
      if (!stream.write(this.format === 'csv' ? csvLine(reject) : ndjsonLine(reject)))
        await once(stream, 'drain');
    });
    this.tail = run.catch(() => {});
    return run;
  }

  /**
   * A dead-letter target for the sink that puts rows the store refused into this same file
   * (reason `store`, line from the record's `meta.offset`), so a partner gets one file to fix.
   * A run of rows (`CsvRun`) the store refused goes back to its ingest to be written row by row
   * (`run.isolate()`), so only the row at fault comes here; a run that cannot go back (its
   * ingest has ended, or the store was not reached) comes here row by row, each with its line.
   */
  deadLetterTarget<T>(serialize: (record: T) => unknown = (r) => r): DeadLetterTarget<T> {
    const note = (line: number, error: unknown, row: unknown) =>
      this.write({
        line,
        column: undefined,
        reason: 'store',
        message: messageOf(error),
        raw: Buffer.from(JSON.stringify(row) ?? 'null', 'utf8'),
        truncated: false,
      });
    return {
      write: async (letters: readonly DeadLetter<T>[]) => {
        for (const l of letters) {
          const record: unknown = l.record;
          if (!(record instanceof CsvRun)) {
            await note(lineOf(l.meta), l.error, serialize(l.record));
            continue;
          }
          // Refused as bad data: one of its rows is; written again one by one, the others land.
          if (l.reason === 'rejected' && record.isolate()) continue;
          for (const { line, csv } of record.lines()) await note(line, l.error, csv.row());
        }
      },
    };
  }

  /** Flushes and closes the file (creating an empty one if nothing was rejected). Idempotent. */
  async close(): Promise<void> {
    await this.tail;
    if (this.closed) return;
    this.closed = true;
    const stream = this.stream;
    if (!stream) return;
    stream.end();
    await once(stream, 'close');
  }
}

function lineOf(meta: RecordMeta | undefined): number {
  const n = Number(meta?.offset);
  return Number.isFinite(n) ? n : 0;
}

const decoder = new TextDecoder('utf-8', { fatal: true });

function ndjsonLine(r: Reject): string {
  const out: Record<string, unknown> = {
    line: r.line,
    column: r.column ?? null,
    reason: r.reason,
    message: r.message,
    truncated: r.truncated,
  };
  try {
    out.raw = decoder.decode(r.raw);
  } catch {
    out.rawBase64 = Buffer.from(r.raw).toString('base64');
  }
  return `${JSON.stringify(out)}\n`;
}

function csvLine(r: Reject): Buffer {
  const head = [
    String(r.line),
    quote(r.column ?? ''),
    r.reason,
    quote(r.message),
    r.truncated ? 'true' : 'false',
  ].join(',');
  // Source: RFC 4180 §2.6–2.7: a field with quotes, commas or line breaks is quoted, inner quotes doubled.
  const raw = Buffer.from(r.raw);
  const escaped = Buffer.from(raw.toString('latin1').replaceAll('"', '""'), 'latin1');
  return Buffer.concat([Buffer.from(`${head},"`, 'utf8'), escaped, Buffer.from('"\r\n')]);
}

function quote(text: string): string {
  return /[",\r\n]/.test(text) ? `"${text.replaceAll('"', '""')}"` : text;
}
