/**
 * Turns the values a mapper returns into what goes over the wire: a string in PostgreSQL's text
 * input syntax, a Buffer (bytea), or null. Every mode uses this one conversion, so a value lands
 * the same whether it travels as a parameter or inside COPY data.
 */

/** A value ready to send: text input syntax, raw bytes, or SQL NULL. */
export type WireValue = string | Buffer | null;

/**
 * An INSERT parameter (and a value of an upsert's row): a wire value, or a number kept as it is.
 * pg sends a number parameter as `String(n)`, the very text `toWire` makes, so no string is made
 * per number before pg makes its own.
 */
export type RowValue = WireValue | number;

/** `toWire`, except that numbers stay numbers. */
export function toRowValue(value: unknown): RowValue {
  return typeof value === 'number' ? value : toWire(value);
}

export function toWire(value: unknown): WireValue {
  switch (typeof value) {
    case 'string':
      return value;
    case 'number':
    case 'bigint':
      return String(value);
    case 'boolean':
      return value ? 'true' : 'false';
    case 'undefined':
      return null;
    case 'object':
      if (value === null) return null;
      if (Buffer.isBuffer(value)) return value;
      if (ArrayBuffer.isView(value)) return Buffer.from(value.buffer, value.byteOffset, value.byteLength);
      // UTC, so a timestamp does not depend on the TZ of the process that wrote it.
      if (value instanceof Date) return value.toISOString();
      if (Array.isArray(value)) return arrayLiteral(value);
      return JSON.stringify(value);
    default:
      // functions and symbols have no SQL meaning
      throw new TypeError(`a ${typeof value} cannot be written to a column`);
  }
}

/**
 * A one-dimensional array literal of wire values, every element quoted (the `unnest` insert
 * form binds one per column). Stride and offset pick one column out of a flat row-major array.
 */
export function columnArrayLiteral(flat: readonly RowValue[], offset: number, stride: number): string {
  let out = '{';
  for (let i = offset; i < flat.length; i += stride) {
    if (i !== offset) out += ',';
    const w = flat[i] as RowValue;
    if (w === null) out += 'NULL';
    else if (typeof w === 'number') out += `"${w}"`;
    else if (typeof w === 'string')
      out += ARRAY_SPECIAL.test(w) ? `"${w.replace(ARRAY_SPECIAL_ALL, '\\$&')}"` : `"${w}"`;
    else out += `"\\\\x${w.toString('hex')}"`;
  }
  return `${out}}`;
}

const ARRAY_SPECIAL = /[\\"]/;
const ARRAY_SPECIAL_ALL = /[\\"]/g;

/** A PostgreSQL array literal, e.g. `{"a","b c",NULL}` (PostgreSQL documentation, Arrays, "Array Value Input"). */
function arrayLiteral(values: readonly unknown[]): string {
  const parts = new Array<string>(values.length);
  for (let i = 0; i < values.length; i++) {
    const v = values[i];
    if (Array.isArray(v)) {
      parts[i] = arrayLiteral(v);
      continue;
    }
    const w = toWire(v);
    if (w === null) parts[i] = 'NULL';
    else if (typeof w === 'string') parts[i] = `"${w.replace(/[\\"]/g, '\\$&')}"`;
    else parts[i] = `"\\\\x${w.toString('hex')}"`;
  }
  return `{${parts.join(',')}}`;
}
