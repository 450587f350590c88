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
import type { WireValue } from './values.js';

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
// enough to keep the per-chunk cost low, small enough not to hold a second copy of a big batch.
const CHUNK_CHARS = 1 << 18;

/** COPY data for `rows`, as Buffers ready to stream; `bytes` is their total length. */
export function encodeCopy(rows: readonly (readonly WireValue[])[], format: CopyFormat): { chunks: Buffer[]; bytes: number } {
  const field = format === 'csv' ? csvField : textField;
  const sep = format === 'csv' ? ',' : '\t';
  const chunks: Buffer[] = [];
  let bytes = 0;
  let text = '';
  for (const row of rows) {
    let line = '';
    for (let i = 0; i < row.length; i++) {
      if (i > 0) line += sep;
      line += field(row[i] as WireValue);
    }
    text += `${line}\n`;
    if (text.length >= CHUNK_CHARS) {
      const b = Buffer.from(text, 'utf8');
      chunks.push(b);
      bytes += b.length;
      text = '';
    }
  }
  if (text.length > 0) {
    const b = Buffer.from(text, 'utf8');
    chunks.push(b);
    bytes += b.length;
  }
  return { chunks, bytes };
}
