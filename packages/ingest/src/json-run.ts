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
import type { ResolvedColumn } from './columns.js';
import type { LineLayout } from './csv-line.js';
import { CsvRun, type RunOwner } from './csv-run.js';
import type { Row } from './options.js';

const QUOTE = 0x22;
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
        this.string(v);
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

  /**
   * A string, quoted with its quotes doubled, as UTF-8 (a lone surrogate as U+FFFD, as
   * `Buffer.from` writes it). Byte by byte: cheaper than a native call for short values.
   */
  private string(s: string): void {
    // At most 3 bytes per UTF-16 unit (a doubled quote is 2), and the two quotes.
    this.room(3 * s.length + 2);
    const buf = this.buf;
    let at = this.at;
    buf[at++] = QUOTE;
    for (let i = 0; i < s.length; i++) {
      let c = s.charCodeAt(i);
      if (c < 0x80) {
        if (c === QUOTE) buf[at++] = QUOTE;
        buf[at++] = c;
      } else if (c < 0x800) {
        buf[at++] = 0xc0 | (c >> 6);
        buf[at++] = 0x80 | (c & 0x3f);
      } else {
        if (c >= 0xd800 && c <= 0xdfff) {
          const d = i + 1 < s.length ? s.charCodeAt(i + 1) : 0;
          if (c <= 0xdbff && d >= 0xdc00 && d <= 0xdfff) {
            const cp = 0x10000 + ((c - 0xd800) << 10) + (d - 0xdc00);
            buf[at++] = 0xf0 | (cp >> 18);
            buf[at++] = 0x80 | ((cp >> 12) & 0x3f);
            buf[at++] = 0x80 | ((cp >> 6) & 0x3f);
            buf[at++] = 0x80 | (cp & 0x3f);
            i++;
            continue;
          }
          c = 0xfffd;
        }
        buf[at++] = 0xe0 | (c >> 12);
        buf[at++] = 0x80 | ((c >> 6) & 0x3f);
        buf[at++] = 0x80 | (c & 0x3f);
      }
    }
    buf[at++] = QUOTE;
    this.at = at;
  }

  private room(n: number): void {
    if (this.at + n <= this.buf.length) return;
    const next = Buffer.allocUnsafe(Math.max(RUN_BYTES, 2 * (this.at + n)));
    this.buf.copy(next, 0, 0, this.at);
    this.buf = next;
  }
}
