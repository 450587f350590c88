/**
 * Per-record size estimates that follow what the adapter actually sends, so that the sink's
 * `maxBytes` bounds the bytes of a write rather than of a JSON rendering of the record.
 */
import { csvField, textField } from './copy-format.js';
import type { ResolvedPostgresOptions } from './options.js';
import { type RowValue, toWire, type WireValue } from './values.js';

// A placeholder such as `$12345` plus its comma, averaged over a large statement, and the
// `(` `)` `,` around each tuple: the SQL text that a row adds to an INSERT.
const PLACEHOLDER_BYTES = 6;
const TUPLE_BYTES = 3;
// Bind message: a 4-byte length before every parameter value.
const PARAM_LENGTH_BYTES = 4;
// What a record whose mapper throws is taken to weigh; it is refused before anything is sent.
const UNMAPPABLE_BYTES = 64;

function wireBytes(v: RowValue): number {
  if (v === null) return 0;
  if (typeof v === 'number') return numberBytes(v);
  return typeof v === 'string' ? utf8Bytes(v) : v.length;
}

/** Bytes of a number as text. */
function numberBytes(v: number): number {
  return Number.isSafeInteger(v) ? integerDigits(v) : String(v).length;
}

/** Bytes a row adds to a multi-row INSERT: the Bind values and the SQL text of its tuple. */
export function insertRowBytes(row: readonly RowValue[]): number {
  let n = TUPLE_BYTES;
  for (const v of row) n += PARAM_LENGTH_BYTES + PLACEHOLDER_BYTES + wireBytes(v);
  return n;
}

/** Bytes a row adds to COPY data in the given format (escapes of rare characters ignored). */
export function copyRowBytes(row: readonly RowValue[], format: 'csv' | 'text'): number {
  let n = 0;
  for (const v of row) {
    // one separator per field (the last one is the newline)
    n += 1;
    if (v === null) n += format === 'text' ? 2 : 0;
    else if (typeof v === 'number') n += numberBytes(v) + (format === 'csv' ? 2 : 0);
    else if (typeof v === 'string') n += utf8Bytes(v) + (format === 'csv' ? 2 : 0);
    else n += 2 * v.length + (format === 'csv' ? 4 : 3);
  }
  return n;
}

/** UTF-8 bytes of a string; a loop for short ones (cheaper than the native call), native beyond. */
function utf8Bytes(s: string): number {
  if (s.length > 48) return Buffer.byteLength(s, 'utf8');
  let n = s.length;
  for (let i = 0; i < s.length; i++) {
    const c = s.charCodeAt(i);
    // 2 bytes up to U+07FF, 3 beyond; a surrogate pair (2 units) makes 4.
    if (c >= 0x80) n += c >= 0x800 && (c < 0xd800 || c > 0xdfff) ? 2 : 1;
  }
  return n;
}

/** Characters of a safe integer as text, its minus sign included: comparisons, no division. */
function integerDigits(v: number): number {
  let a = v;
  let n = 1;
  if (a < 0) {
    a = -a;
    n = 2;
  }
  if (a < 1e8) {
    if (a < 1e4) return n + (a < 10 ? 0 : a < 100 ? 1 : a < 1e3 ? 2 : 3);
    return n + (a < 1e5 ? 4 : a < 1e6 ? 5 : a < 1e7 ? 6 : 7);
  }
  while (a >= 10) {
    a = Math.floor(a / 10);
    n++;
  }
  return n;
}

/** Bytes of a mapped value as text, without building the text for the common types. */
function valueBytes(v: unknown): number | undefined {
  switch (typeof v) {
    case 'string':
      return utf8Bytes(v);
    case 'boolean':
      return v ? 4 : 5;
    case 'undefined':
      return undefined;
    case 'object':
      if (v === null) return undefined;
      if (v instanceof Date) return 24;
      return undefined;
    default:
      return undefined;
  }
}

export function makeEstimator<T>(o: ResolvedPostgresOptions<T>): (record: T) => number {
  const viaCopy = o.mode === 'copy';
  // unnest: each value is a quoted array element and a comma, like a CSV field.
  const unnest = !viaCopy && o.insertForm === 'unnest';
  const format = unnest ? 'csv' : o.copyFormat;
  // Per value of a given text length: what the mode adds around it.
  const fieldOverhead =
    viaCopy || unnest ? (format === 'csv' ? 3 : 1) : PARAM_LENGTH_BYTES + PLACEHOLDER_BYTES;
  const nullBytes = unnest
    ? 5
    : viaCopy
      ? format === 'text'
        ? 3
        : 1
      : PARAM_LENGTH_BYTES + PLACEHOLDER_BYTES;
  const numberOverhead = unnest ? 3 : viaCopy ? 1 : PARAM_LENGTH_BYTES + PLACEHOLDER_BYTES;
  const rowOverhead = viaCopy || unnest ? 0 : TUPLE_BYTES;
  const csvLine = o.csvLine;
  return (record: T) => {
    if (csvLine !== undefined) {
      // A line sent as it is weighs its bytes and the newline.
      const line = csvLine(record);
      if (line !== undefined) return line.length + 1;
    }
    let values: readonly unknown[];
    try {
      values = o.map(record);
      let n = rowOverhead;
      for (let i = 0; i < values.length; i++) {
        const v = values[i];
        // The common types first: text, then numbers, then NULL.
        if (typeof v === 'string') {
          n += utf8Bytes(v) + fieldOverhead;
          continue;
        }
        if (v === null || v === undefined) {
          n += nullBytes;
          continue;
        }
        if (typeof v === 'number' || typeof v === 'bigint') {
          // COPY writes numbers bare (no quotes in CSV either).
          n +=
            (typeof v === 'number' && Number.isSafeInteger(v) ? integerDigits(v) : String(v).length) +
            numberOverhead;
          continue;
        }
        const b = valueBytes(v);
        if (b !== undefined) {
          n += b + fieldOverhead;
          continue;
        }
        // Bytes, arrays, JSON: rarer, and worth converting (and escaping: JSON is full of quotes)
        // to count them right.
        const w: WireValue = toWire(v);
        if (!viaCopy && !unnest) n += insertRowBytes([w]) - TUPLE_BYTES;
        else
          n +=
            1 +
            (typeof w === 'string'
              ? Buffer.byteLength(format === 'csv' ? csvField(w) : textField(w), 'utf8')
              : copyRowBytes([w], format) - 1);
      }
      return n;
    } catch {
      return UNMAPPABLE_BYTES;
    }
  };
}
