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

// Strings are joined into chunks of about this many UTF-16 units before becoming Buffers: large
// enough to keep the per-chunk cost low, small enough that the server gets the first rows of a
// big batch while the rest is still being encoded.
const CHUNK_CHARS = 1 << 16;
const NEWLINE = Buffer.from('\n');

/**
 * One COPY line (with its newline) straight from mapped values, without an intermediate array
 * of wire values: the hot path of `copy` mode. Numbers need neither quotes nor escapes.
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

/**
 * Joins COPY lines into Buffers of about CHUNK_CHARS characters (or bytes) and hands each to
 * `onChunk`. Lines come as strings to encode, or as bytes that already are COPY lines.
 */
export class CopyChunks {
  /** Bytes handed on so far. */
  bytes = 0;
  private text = '';
  /** Encoded parts not handed on yet, in order, and their length. */
  private parts: Buffer[] = [];
  private partsBytes = 0;

  constructor(private readonly onChunk: (chunk: Buffer) => void) {}

  push(line: string): void {
    this.text += line;
    if (this.text.length >= CHUNK_CHARS) this.cut();
  }

  /** A line that is COPY data already (without its newline), sent as it is. */
  pushBytes(line: Uint8Array): void {
    if (this.text.length > 0) this.encodeText();
    this.parts.push(line as Buffer, NEWLINE);
    this.partsBytes += line.length + 1;
    if (this.partsBytes >= CHUNK_CHARS) this.cut();
  }

  /** Hands on whatever is still pending. */
  finish(): void {
    if (this.text.length > 0 || this.partsBytes > 0) this.cut();
  }

  private encodeText(): void {
    const b = Buffer.from(this.text, 'utf8');
    this.text = '';
    this.parts.push(b);
    this.partsBytes += b.length;
  }

  private cut(): void {
    let b: Buffer;
    if (this.partsBytes === 0) {
      b = Buffer.from(this.text, 'utf8');
      this.text = '';
    } else {
      if (this.text.length > 0) this.encodeText();
      b = Buffer.concat(this.parts, this.partsBytes);
      this.parts = [];
      this.partsBytes = 0;
    }
    this.bytes += b.length;
    this.onChunk(b);
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
  const data = new CopyChunks((chunk) => chunks.push(chunk));
  for (const row of rows) data.push(copyRow(row, format));
  data.finish();
  return { chunks, bytes: data.bytes };
}
