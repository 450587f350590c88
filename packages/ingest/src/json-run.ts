/**
 * Valid NDJSON rows handed on as COPY (FORMAT csv) text. A JSON line is not COPY input, but once
 * its row is built from declared columns (parsed, checked, converted), the row's values can be
 * written as one CSV line right away: no row object reaches the sink, and consecutive rows go as
 * one `CsvRun`, as valid CSV rows do. What a line holds, per value (PostgreSQL documentation,
 * COPY, "CSV Format"): NULL as an unquoted empty field, a string quoted with its quotes doubled
 * (so a comma, a line break or `\.` in it stays data), a number as JavaScript writes it, a boolean
 * as `true` / `false`; the PostgreSQL adapter writes the row object the same way.
 *
 * The line must also turn back into the same row (`CsvLine.row()`, for a dead letter or another
 * sink), read by the declared columns as a CSV record is: so a row with an empty string (which a
 * CSV reader takes for a missing value) stays a row object, and `json` columns never go as lines.
 */
import { quotedCsvBound, writeQuotedCsv } from '@spillway/core/kit';
import type { ResolvedColumn, Row } from './columns.js';
import type { LineLayout } from './csv-line.js';
import { CsvRun, type RunOwner } from './csv-run.js';

const COMMA = 0x2c;
const LF = 0x0a;
/** First buffer of a run; one row longer than this gets a buffer of its own size. */
const RUN_BYTES = 16 * 1024;

/** True when rows of these columns can go as lines (no `json` column). */
export function linesFit(columns: readonly ResolvedColumn[]): boolean {
  return columns.every((c) => c.type !== 'json');
}

/** Rows of NDJSON as the bytes of a CSV run, with the physical line of each row. */
export class JsonRun extends CsvRun {
  constructor(
    bytes: Buffer,
    /** Physical line of each row, in order. */
    private readonly rowLines: readonly number[],
    layout: LineLayout,
    owner: RunOwner,
  ) {
    super(bytes, rowLines[0]!, rowLines.length, layout, owner);
  }

  /** The rows with the lines they were read from (the CSV text has its own line breaks). */
  override lines() {
    return super.lines().map((l, i) => ({ line: this.rowLines[i]!, csv: l.csv }));
  }
}

export interface TakenJsonRun {
  readonly bytes: Buffer;
  readonly lines: number[];
}

/** Encodes rows into consecutive COPY lines, LF between them. */
export class JsonRunBuilder {
  private buf = Buffer.allocUnsafe(0);
  private at = 0;
  private lines: number[] = [];

  constructor(private readonly columns: readonly ResolvedColumn[]) {}

  /** Adds the row's line; false (nothing added) when the row must stay a row object. */
  add(row: Row, line: number): boolean {
    const start = this.at;
    if (this.lines.length > 0) {
      this.room(1);
      this.buf[this.at++] = LF;
    }
    const columns = this.columns;
    for (let i = 0; i < columns.length; i++) {
      if (i > 0) {
        this.room(1);
        this.buf[this.at++] = COMMA;
      }
      const v = row[columns[i]!.name];
      if (v === null || v === undefined) continue;
      if (typeof v === 'string') {
        if (v === '') {
          this.at = start;
          return false;
        }
        this.room(quotedCsvBound(v.length));
        this.at = writeQuotedCsv(this.buf, this.at, v);
      } else if (typeof v === 'number' || typeof v === 'boolean') {
        this.ascii(String(v));
      } else {
        this.at = start;
        return false;
      }
    }
    this.lines.push(line);
    return true;
  }

  /** The rows added so far, which then start again empty; undefined when there are none. */
  take(): TakenJsonRun | undefined {
    if (this.lines.length === 0) return undefined;
    const run = { bytes: this.buf.subarray(0, this.at), lines: this.lines };
    // The taken bytes stay the run's: the next rows go into a new buffer.
    this.buf = Buffer.allocUnsafe(0);
    this.at = 0;
    this.lines = [];
    return run;
  }

  /** Text of ASCII characters only (a number, `true`, `false`), byte by byte. */
  private ascii(s: string): void {
    this.room(s.length);
    const buf = this.buf;
    let at = this.at;
    for (let i = 0; i < s.length; i++) buf[at++] = s.charCodeAt(i);
    this.at = at;
  }

  private room(n: number): void {
    if (this.at + n <= this.buf.length) return;
    const next = Buffer.allocUnsafe(Math.max(RUN_BYTES, 2 * (this.at + n)));
    this.buf.copy(next, 0, 0, this.at);
    this.buf = next;
  }
}
