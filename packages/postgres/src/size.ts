/**
 * Per-record size estimates that follow what the adapter actually sends, so that the sink's
 * `maxBytes` bounds the bytes of a write rather than of a JSON rendering of the record.
 */
import type { ResolvedPostgresOptions } from './options.js';
import { toWire, type WireValue } from './values.js';

// A placeholder such as `$12345` plus its comma, averaged over a large statement, and the
// `(` `)` `,` around each tuple: the SQL text that a row adds to an INSERT.
const PLACEHOLDER_BYTES = 6;
const TUPLE_BYTES = 3;
// Bind message: a 4-byte length before every parameter value.
const PARAM_LENGTH_BYTES = 4;
// What a record whose mapper throws is taken to weigh; it is refused before anything is sent.
const UNMAPPABLE_BYTES = 64;

function wireBytes(v: WireValue): number {
  if (v === null) return 0;
  return typeof v === 'string' ? Buffer.byteLength(v, 'utf8') : v.length;
}

/** Bytes a row adds to a multi-row INSERT: the Bind values and the SQL text of its tuple. */
export function insertRowBytes(row: readonly WireValue[]): number {
  let n = TUPLE_BYTES;
  for (const v of row) n += PARAM_LENGTH_BYTES + PLACEHOLDER_BYTES + wireBytes(v);
  return n;
}

/** Bytes a row adds to COPY data in the given format (escapes of rare characters ignored). */
export function copyRowBytes(row: readonly WireValue[], format: 'csv' | 'text'): number {
  let n = 0;
  for (const v of row) {
    // one separator per field (the last one is the newline)
    n += 1;
    if (v === null) n += format === 'text' ? 2 : 0;
    else if (typeof v === 'string') n += Buffer.byteLength(v, 'utf8') + (format === 'csv' ? 2 : 0);
    else n += 2 * v.length + (format === 'csv' ? 4 : 3);
  }
  return n;
}

export function makeEstimator<T>(o: ResolvedPostgresOptions<T>): (record: T) => number {
  const viaCopy = o.mode === 'copy';
  const format = o.copyFormat;
  return (record: T) => {
    let row: WireValue[];
    try {
      const values = o.map(record);
      row = new Array<WireValue>(values.length);
      for (let i = 0; i < values.length; i++) row[i] = toWire(values[i]);
    } catch {
      return UNMAPPABLE_BYTES;
    }
    return viaCopy ? copyRowBytes(row, format) : insertRowBytes(row);
  };
}
