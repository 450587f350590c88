/**
 * Encoding rows as COPY data (PostgreSQL documentation, COPY, "File Formats").
 *
 * text: columns separated by a tab, rows ended by a newline, NULL is `\N`; a backslash, newline,
 * carriage return or tab inside a value is written as `\\`, `\n`, `\r`, `\t`. Since every
 * backslash in a value is doubled, a value `\N` or `\.` can never be read as NULL or as the
 * end-of-data marker.
 *
 * csv: every non-null value is quoted, with inner quotes doubled; NULL is an unquoted empty
 * field, so `""` is the empty string. Quoting everything also keeps newlines, commas and `\.`
 * inside a value literal.
 */
import { quotedCsvBound, writeQuotedCsv } from '@spillway/core/kit';
import type { CopyFormat } from './options.js';
import { toWire, type WireValue } from './values.js';

const TEXT_SPECIAL = /[\\\n\r\t]/;
const TEXT_SPECIAL_ALL = /[\\\n\r\t]/g;
const TEXT_ESCAPES: Record<string, string> = { '\\': '\\\\', '\n': '\\n', '\r': '\\r', '\t': '\\t' };
const textEscape = (c: string) => TEXT_ESCAPES[c]!;

export function textField(value: WireValue): string {
  if (value === null) return '\\N';
  if (typeof value !== 'string') return `\\\\x${value.toString('hex')}`;
  return TEXT_SPECIAL.test(value) ? value.replace(TEXT_SPECIAL_ALL, textEscape) : value;
}

export function csvField(value: WireValue): string {
  if (value === null) return '';
  if (typeof value !== 'string') return `"\\x${value.toString('hex')}"`;
  return value.includes('"') ? `"${value.replace(/"/g, '""')}"` : `"${value}"`;
}

/** The `WITH (…)` clause that matches the encoder. */
export function copyOptions(format: CopyFormat): string {
  return format === 'csv' ? '(FORMAT csv)' : '(FORMAT text)';
}

/**
 * One COPY line (with its newline) straight from mapped values, without an intermediate array
 * of wire values. Numbers need neither quotes nor escapes. `CopyChunks.row()` writes the same
 * bytes without building the string.
 */
export function copyLine(values: readonly unknown[], format: CopyFormat): string {
  const csv = format === 'csv';
  let line = '';
  for (let i = 0; i < values.length; i++) {
    if (i > 0) line += csv ? ',' : '\t';
    const v = values[i];
    if (typeof v === 'string') line += csv ? csvField(v) : textField(v);
    else if (typeof v === 'number' || typeof v === 'bigint') line += String(v);
    else if (v === null || v === undefined) line += csv ? '' : '\\N';
    else line += csv ? csvField(toWire(v)) : textField(toWire(v));
  }
  return `${line}\n`;
}

// Chunks of COPY data are about this many bytes: large enough to keep the per-chunk cost low,
// small enough that the server gets the first rows of a big batch while the rest is encoded.
const CHUNK_BYTES = 1 << 16;
// Longer text-format strings are escaped as strings and written by the native UTF-8 encoder;
// shorter ones byte by byte here, which is cheaper than a native call for the short values most
// rows hold. (CSV strings go through `writeQuotedCsv`, which does the same.)
const NATIVE_ABOVE = 256;

const BACKSLASH = 0x5c;
const NEWLINE = 0x0a;

/**
 * Writes COPY rows as UTF-8 bytes straight into Buffers of about CHUNK_BYTES and hands each full
 * one to `onChunk`: no string per field or per line, so the garbage a row leaves is only what the
 * mapper made. A chunk always ends at the end of a row, and a row that throws half-way (a value
 * with no SQL meaning) leaves nothing behind.
 */
export class CopyChunks {
  /** Bytes handed on so far. */
  bytes = 0;
  private readonly csv: boolean;
  private buf = Buffer.allocUnsafe(CHUNK_BYTES);
  private at = 0;
  /** Where the row being written starts in `buf`. */
  private rowStart = 0;

  constructor(
    private readonly onChunk: (chunk: Buffer) => void,
    format: CopyFormat = 'csv',
  ) {
    this.csv = format === 'csv';
  }

  /** One row (mapped values or wire values), with its newline. */
  row(values: readonly unknown[]): void {
    this.rowStart = this.at;
    try {
      const sep = this.csv ? 0x2c : 0x09;
      for (let i = 0; i < values.length; i++) {
        if (i > 0) {
          this.room(1);
          this.buf[this.at++] = sep;
        }
        this.value(values[i]);
      }
      this.room(1);
      this.buf[this.at++] = NEWLINE;
    } catch (error) {
      this.at = this.rowStart;
      throw error;
    }
  }

  /** A line that is COPY data already (without its newline), copied in as it is. */
  pushBytes(line: Uint8Array): void {
    this.rowStart = this.at;
    this.room(line.length + 1);
    this.buf.set(line, this.at);
    this.at += line.length;
    this.buf[this.at++] = NEWLINE;
  }

  /** Hands on whatever is still pending. */
  finish(): void {
    if (this.at === 0) return;
    this.cut(this.at);
    this.buf = Buffer.allocUnsafe(CHUNK_BYTES);
    this.at = 0;
    this.rowStart = 0;
  }

  private value(v: unknown): void {
    if (typeof v === 'string') this.string(v);
    else if (typeof v === 'number') this.number(v);
    else if (typeof v === 'bigint') this.ascii(String(v));
    else if (v === null || v === undefined) this.null();
    else {
      const w = toWire(v);
      if (w === null) this.null();
      else if (typeof w === 'string') this.string(w);
      else this.ascii(this.csv ? `"\\x${w.toString('hex')}"` : `\\\\x${w.toString('hex')}`);
    }
  }

  private null(): void {
    if (this.csv) return;
    this.room(2);
    this.buf[this.at++] = BACKSLASH;
    this.buf[this.at++] = 0x4e; // N
  }

  private number(v: number): void {
    // Integers digit by digit; anything else (fractions, NaN, Infinity) as JavaScript prints it.
    if (!Number.isInteger(v) || v > 0x7fffffff || v < -0x7fffffff) {
      this.ascii(String(v));
      return;
    }
    this.room(11);
    const buf = this.buf;
    if (v < 0) {
      buf[this.at++] = 0x2d;
      v = -v;
    }
    let digits = 1;
    for (let x = v; x >= 10; x = (x / 10) | 0) digits++;
    let end = this.at + digits;
    this.at = end;
    do {
      buf[--end] = 0x30 + (v % 10);
      v = (v / 10) | 0;
    } while (v > 0);
  }

  private ascii(s: string): void {
    this.room(s.length);
    const buf = this.buf;
    for (let i = 0; i < s.length; i++) buf[this.at++] = s.charCodeAt(i);
  }

  /** A string, quoted (csv, `writeQuotedCsv`) or escaped (text), as UTF-8. */
  private string(s: string): void {
    if (this.csv) {
      this.room(quotedCsvBound(s.length));
      this.at = writeQuotedCsv(this.buf, this.at, s);
    } else this.textString(s);
  }

  /** A string escaped for the text format, as UTF-8 (a lone surrogate as U+FFFD, as Buffer.from does). */
  private textString(s: string): void {
    if (s.length > NATIVE_ABOVE) {
      const field = textField(s);
      this.room(3 * field.length);
      this.at += this.buf.write(field, this.at, 'utf8');
      return;
    }
    // At most 3 bytes per UTF-16 unit (an escape is 2). The UTF-8 encoder is written out as in
    // `writeQuotedCsv`, for the reason given there; only the escapes differ.
    this.room(3 * s.length);
    const buf = this.buf;
    let at = this.at;
    for (let i = 0; i < s.length; i++) {
      let c = s.charCodeAt(i);
      if (c < 0x80) {
        if (c === BACKSLASH || c === NEWLINE || c === 0x0d || c === 0x09) {
          buf[at++] = BACKSLASH;
          c = c === NEWLINE ? 0x6e : c === 0x0d ? 0x72 : c === 0x09 ? 0x74 : BACKSLASH;
        }
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
    this.at = at;
  }

  /**
   * Makes room for `n` more bytes of the current row: when the chunk is full, the rows before this
   * one go out and the row's start moves into a fresh chunk.
   */
  private room(n: number): void {
    if (this.at + n <= this.buf.length) return;
    const partial = this.at - this.rowStart;
    const next = Buffer.allocUnsafe(Math.max(CHUNK_BYTES, partial + n));
    this.buf.copy(next, 0, this.rowStart, this.at);
    if (this.rowStart > 0) this.cut(this.rowStart);
    this.buf = next;
    this.at = partial;
    this.rowStart = 0;
  }

  /** Hands on `buf[0, end)`; the bytes handed on now belong to the connection, never rewritten. */
  private cut(end: number): void {
    const chunk = this.buf.subarray(0, end);
    this.bytes += chunk.length;
    this.onChunk(chunk);
  }
}

/** One COPY line (with its newline) from wire values. */
export function copyRow(row: readonly WireValue[], format: CopyFormat): string {
  const field = format === 'csv' ? csvField : textField;
  let line = '';
  for (let i = 0; i < row.length; i++) {
    if (i > 0) line += format === 'csv' ? ',' : '\t';
    line += field(row[i] as WireValue);
  }
  return `${line}\n`;
}

/** COPY data for `rows`, as Buffers ready to send; `bytes` is their total length. */
export function encodeCopy(
  rows: readonly (readonly WireValue[])[],
  format: CopyFormat,
): { chunks: Buffer[]; bytes: number } {
  const chunks: Buffer[] = [];
  const data = new CopyChunks((chunk) => chunks.push(chunk), format);
  for (const row of rows) data.row(row);
  data.finish();
  return { chunks, bytes: data.bytes };
}
