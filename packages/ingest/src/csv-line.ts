/**
 * Valid CSV rows handed on as their own text. A row that passed every check, and whose values
 * would be written exactly as the file spells them, can go to a store that reads CSV itself
 * (PostgreSQL's `COPY … (FORMAT csv)`) as its bytes: no row object, no mapping, no re-encoding.
 *
 * What COPY reads differently from the reading rules (PostgreSQL documentation, COPY, "CSV
 * Format"), and how a line is kept from it:
 * - an unquoted empty field is NULL to COPY, an empty string to a text row: it is written `""`;
 * - a CR outside quotes ends a line for COPY, it is data here: such a row is not sent as a line;
 * - a lone `\.` is COPY's end-of-data marker: not sent as a line either.
 * The framer has already refused every quote RFC 4180 does not allow, and the line break is gone.
 * With declared columns, a row goes as its line only when each value is written as it is spelled
 * (`checkInOrder`); the rules are in the package README.
 */
import { convert, isTimestamp, isTimestampAt, type ResolvedColumn, type Row } from './columns.js';
import type { RecordCheck } from './csv-framer.js';
import type { RejectReason } from './reject.js';

const QUOTE = 0x22;
const CR = 0x0d;
const BACKSLASH = 0x5c;
const DOT = 0x2e;

/** How a line becomes the row it stands for. */
export interface LineLayout {
  row(bytes: Buffer): Row;
}

/**
 * One valid CSV row as the bytes of a COPY (FORMAT csv) line: UTF-8, comma-separated fields in
 * the order of the ingest's columns, without a line break, NULL as an unquoted empty field.
 */
export class CsvLine {
  constructor(
    readonly bytes: Buffer,
    private readonly layout: LineLayout,
  ) {}

  /** The row object the line stands for, as the ingest would have built it (decoded on demand). */
  row(): Row {
    return this.layout.row(this.bytes);
  }
}

/** `scanLine` flag: an unquoted empty field. */
export const EMPTY_FIELD = 1;
/** `scanLine` flag: a CR outside quotes, or a lone `\.`. */
export const NOT_A_LINE = 2;

/**
 * Counts the fields of a well-formed record and notes what COPY would read otherwise: returns
 * `fields * 4 + flags` (`EMPTY_FIELD`, `NOT_A_LINE`), a number so the hot path allocates nothing.
 */
export function scanLine(b: Buffer, delimiter: number): number {
  let fields = 1;
  let flags = 0;
  let quoted = false;
  let fieldStart = true;
  const n = b.length;
  for (let i = 0; i < n; i++) {
    const c = b[i]!;
    if (quoted) {
      // A doubled quote closes and reopens: the next byte is a quote again.
      if (c === QUOTE) quoted = false;
      continue;
    }
    if (c === delimiter) {
      if (fieldStart) flags |= EMPTY_FIELD;
      fields++;
      fieldStart = true;
      continue;
    }
    if (c === QUOTE) quoted = true;
    else if (c === CR) flags |= NOT_A_LINE;
    fieldStart = false;
  }
  if (fieldStart) flags |= EMPTY_FIELD;
  if (n === 2 && b[0] === BACKSLASH && b[1] === DOT) flags |= NOT_A_LINE;
  return fields * 4 + flags;
}

/** The record with each unquoted empty field written `""` (an empty string to COPY, not NULL). */
export function quoteEmptyFields(b: Buffer, delimiter: number, fields: number): Buffer {
  const out = Buffer.allocUnsafe(b.length + 2 * fields);
  let o = 0;
  let quoted = false;
  let fieldStart = true;
  for (let i = 0; i < b.length; i++) {
    const c = b[i]!;
    if (!quoted && c === delimiter) {
      if (fieldStart) {
        out[o++] = QUOTE;
        out[o++] = QUOTE;
      }
      fieldStart = true;
    } else {
      if (c === QUOTE) quoted = !quoted;
      fieldStart = false;
    }
    out[o++] = c;
  }
  if (fieldStart) {
    out[o++] = QUOTE;
    out[o++] = QUOTE;
  }
  return out.subarray(0, o);
}

/**
 * Checks the fields of a record against declared columns that read them in order. Returns
 * undefined when the row passes and every value would be written as the file spells it (the row
 * can go as its line), the first failure as the row builder (`fromColumns` in `ingest.ts`)
 * would report it, or `'convert'` when the row needs its row object.
 */
export function checkInOrder(
  columns: ResolvedColumn[],
  fields: string[],
  raw: Buffer,
  delimiter: number,
): 'convert' | { reason: RejectReason; message: string; column: string } | undefined {
  let asWritten = true;
  for (let i = 0; i < columns.length; i++) {
    const c = columns[i]!;
    const text = fields[i]!;
    if (text === '') {
      if (c.required) return { reason: 'required', message: 'a required value is missing', column: c.name };
      // NULL: an unquoted empty field is NULL to COPY too, a quoted one is not.
      if (raw.includes(QUOTE)) asWritten = false;
      continue;
    }
    // The common cases need no conversion: their text is valid and is what would be written.
    if (c.bare && (c.type === 'string' || (c.type === 'boolean' && (text === 'true' || text === 'false'))))
      continue;
    if (c.bare && c.type === 'integer' && isPlainInteger(text)) continue;
    if (c.bare && c.type === 'number' && isPlainDecimal(text)) continue;
    if (c.bare && c.type === 'timestamp' && text.length > 10 && isTimestamp(text)) continue;
    const v = convert(c, text);
    if (!v.ok) return { reason: v.reason, message: v.message, column: c.name };
    if (asWritten && !writtenAsSpelled(c, text, v.value)) asWritten = false;
  }
  if (!asWritten) return 'convert';
  if (raw.includes(CR) || (raw.length === 2 && raw[0] === BACKSLASH && raw[1] === DOT)) {
    if (scanLine(raw, delimiter) & NOT_A_LINE) return 'convert';
  }
  return undefined;
}

/**
 * The check, on a plain record's bytes (`CsvFramer.frameRuns`), that declared columns reading its
 * fields in order would pass it and write each value as spelled: what `checkInOrder` finds on
 * decoded fields, for the columns whose rule reads the bytes directly: `string` (a quoted `""`
 * is not: it is missing), `integer` and `number` spelled plainly, `boolean` `true` / `false`,
 * `timestamp` with a time. A quoted value of another type, or any other spelling, ends the run:
 * the record is then checked alone. Undefined when a column has rules (pattern, enum, min, max) or
 * is `json`: such columns are checked on decoded fields only.
 */
export function plainCheck(columns: readonly ResolvedColumn[]): RecordCheck | undefined {
  if (!columns.every((c) => c.bare && c.type !== 'json')) return undefined;
  const types = columns.map((c) => c.type);
  return (chunk, fieldAt) => {
    for (let k = 0; k < types.length; k++) {
      const start = fieldAt[k]!;
      const end = fieldAt[k + 1]! - 1;
      const type = types[k];
      if (chunk[start] === QUOTE) {
        if (type !== 'string' || end - start === 2) return false;
        continue;
      }
      if (type === 'string') continue;
      if (type === 'boolean') {
        if (!isWord(chunk, start, end, TRUE) && !isWord(chunk, start, end, FALSE)) return false;
      } else if (type === 'integer') {
        if (!isPlainIntegerAt(chunk, start, end)) return false;
      } else if (type === 'number') {
        if (!isPlainDecimalAt(chunk, start, end)) return false;
      } else if (end - start <= 10 || !isTimestampAt(chunk, start, end)) return false;
    }
    return true;
  };
}

const TRUE = Buffer.from('true');
const FALSE = Buffer.from('false');

function isWord(chunk: Buffer, start: number, end: number, word: Buffer): boolean {
  if (end - start !== word.length) return false;
  for (let i = 0; i < word.length; i++) if (chunk[start + i] !== word[i]) return false;
  return true;
}

/**
 * True for an integer written as JavaScript writes it, and safe: an optional minus, no leading
 * zero, at most 15 digits (so below 2^53), not "-0".
 */
export function isPlainInteger(text: string): boolean {
  const n = text.length;
  let i = text.charCodeAt(0) === 0x2d ? 1 : 0;
  if (n === i || n - i > 15) return false;
  if (text.charCodeAt(i) === 0x30) return n === 1;
  for (; i < n; i++) {
    const c = text.charCodeAt(i);
    if (c < 0x30 || c > 0x39) return false;
  }
  return true;
}

/**
 * True for a decimal that JavaScript writes back as the same text, so valid and written as
 * spelled without converting it: an optional minus, an integer part without leading zeros, an
 * optional fraction without trailing zeros, at most 15 significant digits (a double keeps 15
 * decimal digits exactly, so the shortest text of the number is these digits), no exponent, and
 * not below 10^-6 (JavaScript writes smaller numbers with an exponent). Not "-0".
 */
export function isPlainDecimal(text: string): boolean {
  const n = text.length;
  let i = text.charCodeAt(0) === 0x2d ? 1 : 0;
  const intStart = i;
  while (i < n && isDigitCode(text.charCodeAt(i))) i++;
  const intDigits = i - intStart;
  if (intDigits === 0 || (intDigits > 1 && text.charCodeAt(intStart) === 0x30)) return false;
  if (i === n) return intDigits <= 15 && text !== '-0';
  if (text.charCodeAt(i) !== 0x2e) return false;
  const fracStart = ++i;
  while (i < n && isDigitCode(text.charCodeAt(i))) i++;
  if (i !== n || i === fracStart || text.charCodeAt(n - 1) === 0x30) return false;
  const zeroInt = intDigits === 1 && text.charCodeAt(intStart) === 0x30;
  if (!zeroInt) return intDigits + (n - fracStart) <= 15;
  // 0.000…: the significant digits start after the zeros; at most 5 zeros (10^-6 and above).
  let z = fracStart;
  while (text.charCodeAt(z) === 0x30) z++;
  return z - fracStart <= 5 && n - z <= 15;
}

function isDigitCode(c: number): boolean {
  return c >= 0x30 && c <= 0x39;
}

/** `isPlainInteger` of the text in `b[start, end)`, read as bytes (no string made). */
export function isPlainIntegerAt(b: Buffer, start: number, end: number): boolean {
  let i = b[start] === 0x2d ? start + 1 : start;
  if (end === i || end - i > 15) return false;
  if (b[i] === 0x30) return end - start === 1;
  for (; i < end; i++) if (!isDigitCode(b[i]!)) return false;
  return true;
}

/** `isPlainDecimal` of the text in `b[start, end)`, read as bytes (no string made). */
export function isPlainDecimalAt(b: Buffer, start: number, end: number): boolean {
  let i = b[start] === 0x2d ? start + 1 : start;
  const intStart = i;
  while (i < end && isDigitCode(b[i]!)) i++;
  const intDigits = i - intStart;
  if (intDigits === 0 || (intDigits > 1 && b[intStart] === 0x30)) return false;
  if (i === end) return intDigits <= 15 && !(intStart > start && b[intStart] === 0x30);
  if (b[i] !== 0x2e) return false;
  const fracStart = ++i;
  while (i < end && isDigitCode(b[i]!)) i++;
  if (i !== end || i === fracStart || b[end - 1] === 0x30) return false;
  if (!(intDigits === 1 && b[intStart] === 0x30)) return intDigits + (end - fracStart) <= 15;
  let z = fracStart;
  while (b[z] === 0x30) z++;
  return z - fracStart <= 5 && end - z <= 15;
}

/** True when a converted value goes to the store as the same text it came as. */
function writtenAsSpelled(c: ResolvedColumn, text: string, value: unknown): boolean {
  switch (c.type) {
    case 'string':
      return true;
    case 'integer':
    case 'number':
      return String(value) === text;
    case 'boolean':
      return (value ? 'true' : 'false') === text;
    case 'timestamp':
      return value === text;
    case 'json':
      // Parsed and written again: a store sees JSON text, not the same string.
      return false;
  }
}
