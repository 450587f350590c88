import { booleanOption, invalidOption } from '@spillway/core/kit';
import type { RejectReason } from './reject.js';

/** A row after parsing and validation, before `map`: column name → value. */
export type Row = Record<string, unknown>;

/** The value types of a declared column. */
export type ColumnType = 'string' | 'integer' | 'number' | 'boolean' | 'timestamp' | 'json';

export const COLUMN_TYPES: readonly ColumnType[] = [
  'string',
  'integer',
  'number',
  'boolean',
  'timestamp',
  'json',
];

/**
 * One column of a declared row. In CSV an empty field counts as missing; in NDJSON a missing
 * property or `null` does (an empty string is a value, checked and converted like any other).
 * Missing optional columns become `null`.
 */
export interface ColumnSpec {
  /** Name in the output row, and the header name (CSV) or property (NDJSON) read unless `from` is set. */
  readonly name: string;
  /** Header name or property to read instead of `name`. */
  readonly from?: string;
  /** @default 'string' */
  readonly type?: ColumnType;
  /** Reject the row when the value is missing. @default false */
  readonly required?: boolean;
  /** The text must match (tested on the text as it came, before conversion). */
  readonly pattern?: RegExp | string;
  /** Smallest value (numbers) or length (strings). */
  readonly min?: number;
  /** Largest value (numbers) or length (strings). */
  readonly max?: number;
  /** Allowed values, compared as text. */
  readonly enum?: readonly string[];
}

export interface ResolvedColumn {
  readonly name: string;
  readonly from: string;
  readonly type: ColumnType;
  readonly required: boolean;
  readonly pattern: RegExp | undefined;
  readonly min: number | undefined;
  readonly max: number | undefined;
  readonly enum: ReadonlySet<string> | undefined;
  /** No pattern, allowed values, minimum or maximum: only the type is checked. */
  readonly bare: boolean;
}

export type Converted = { ok: true; value: unknown } | { ok: false; reason: RejectReason; message: string };

// Timestamps: RFC 3339, section 5.6 "Internet Date/Time Format": full-date, or full-date "T"
// full-time with a required offset (section 5.6's note allows "t", "z" and a space instead of
// "T"). No offset, no guess. As a regular expression (`timestamp()` reads it by hand):
//   ^(\d{4})-(\d{2})-(\d{2})(?:[Tt ](\d{2}):(\d{2}):(\d{2})(?:\.(\d+))?(?:[Zz]|([+-])(\d{2}):(\d{2})))?$
// Source: RFC 8259, section 6 (JSON number grammar), with an optional leading "+" and leading zeros
// tolerated, as spreadsheets write them (from memory: common practice).
const NUMBER = /^[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?$/;
const INTEGER = /^[+-]?\d+$/;
const TRUE = new Set(['true', 't', 'yes', 'y', '1']);
const FALSE = new Set(['false', 'f', 'no', 'n', '0']);

export function resolveColumns(columns: unknown): ResolvedColumn[] {
  if (!Array.isArray(columns) || columns.length === 0)
    throw invalidOption('columns', 'a non-empty array of column specs', columns);
  const names = new Set<string>();
  return columns.map((c: unknown, i) => {
    const at = `columns[${i}]`;
    if (typeof c !== 'object' || c === null)
      throw invalidOption(at, 'an object { name, type?, required?, pattern?, min?, max?, enum? }', c);
    const s = c as Record<string, unknown>;
    if (typeof s.name !== 'string' || s.name.length === 0)
      throw invalidOption(`${at}.name`, 'a non-empty string', s.name);
    if (names.has(s.name)) throw invalidOption(`${at}.name`, 'a name not used by another column', s.name);
    names.add(s.name);
    if (s.from !== undefined && (typeof s.from !== 'string' || s.from.length === 0))
      throw invalidOption(`${at}.from`, 'a non-empty string', s.from);
    const type = s.type ?? 'string';
    if (!COLUMN_TYPES.includes(type as ColumnType))
      throw invalidOption(`${at}.type`, `one of ${COLUMN_TYPES.join(', ')}`, s.type);
    const required = booleanOption(`${at}.required`, s.required, false);
    let pattern: RegExp | undefined;
    if (s.pattern instanceof RegExp)
      pattern = new RegExp(s.pattern.source, s.pattern.flags.replace(/[gy]/g, ''));
    else if (typeof s.pattern === 'string') {
      try {
        pattern = new RegExp(s.pattern, 'u');
      } catch {
        throw invalidOption(`${at}.pattern`, 'a valid regular expression', s.pattern);
      }
    } else if (s.pattern !== undefined)
      throw invalidOption(`${at}.pattern`, 'a RegExp or a string', s.pattern);
    for (const k of ['min', 'max'] as const) {
      if (s[k] !== undefined && !(typeof s[k] === 'number' && Number.isFinite(s[k])))
        throw invalidOption(`${at}.${k}`, 'a finite number', s[k]);
    }
    if (s.enum !== undefined && !(Array.isArray(s.enum) && s.enum.every((v) => typeof v === 'string'))) {
      throw invalidOption(`${at}.enum`, 'an array of strings', s.enum);
    }
    return {
      name: s.name,
      from: (s.from as string | undefined) ?? s.name,
      type: type as ColumnType,
      required,
      pattern,
      min: s.min as number | undefined,
      max: s.max as number | undefined,
      enum: s.enum ? new Set(s.enum as string[]) : undefined,
      bare: pattern === undefined && s.enum === undefined && s.min === undefined && s.max === undefined,
    };
  });
}

/** True when a CSV field counts as missing: absent or empty. */
export function isMissing(value: unknown): boolean {
  return value === undefined || value === null || value === '';
}

/** True when an NDJSON property counts as missing: absent or `null` (an empty string is a value). */
export function isAbsent(value: unknown): boolean {
  return value === undefined || value === null;
}

/**
 * Converts one present value to its column's type and checks the column's rules. Text (every CSV
 * field, and NDJSON strings) is parsed; NDJSON values of the right JSON type are taken as they are.
 */
export function convert(col: ResolvedColumn, value: unknown): Converted {
  const text = typeof value === 'string' ? value : undefined;
  if (text !== undefined) {
    if (col.pattern && !col.pattern.test(text)) return fail('pattern', `does not match ${col.pattern}`);
    if (col.enum && !col.enum.has(text))
      return fail('enum', `is not one of the ${col.enum.size} allowed values`);
  } else if (col.pattern || col.enum) {
    const asText = typeof value === 'number' || typeof value === 'boolean' ? String(value) : undefined;
    if (asText === undefined)
      return fail(
        'type',
        `expected text for a column with a pattern or allowed values, got ${kindOf(value)}`,
      );
    if (col.pattern && !col.pattern.test(asText)) return fail('pattern', `does not match ${col.pattern}`);
    if (col.enum && !col.enum.has(asText))
      return fail('enum', `is not one of the ${col.enum.size} allowed values`);
  }
  switch (col.type) {
    case 'string': {
      if (text === undefined) return fail('type', `expected a string, got ${kindOf(value)}`);
      return ranged(col, text, text.length, 'length');
    }
    case 'integer': {
      let n: number;
      if (text !== undefined) {
        if (!INTEGER.test(text)) return fail('type', 'expected an integer');
        n = Number(text);
      } else if (typeof value === 'number') n = value;
      else return fail('type', `expected an integer, got ${kindOf(value)}`);
      if (!Number.isInteger(n)) return fail('type', 'expected an integer');
      // Beyond 2^53 a JS number no longer holds every integer: declare such ids as strings.
      if (!Number.isSafeInteger(n))
        return fail('range', 'integer beyond ±(2^53 − 1); declare the column as string');
      return ranged(col, n, n, 'value');
    }
    case 'number': {
      let n: number;
      if (text !== undefined) {
        if (!NUMBER.test(text)) return fail('type', 'expected a number');
        n = Number(text);
      } else if (typeof value === 'number') n = value;
      else return fail('type', `expected a number, got ${kindOf(value)}`);
      if (!Number.isFinite(n)) return fail('range', 'number out of range');
      return ranged(col, n, n, 'value');
    }
    case 'boolean': {
      if (typeof value === 'boolean') return { ok: true, value };
      const t = text?.toLowerCase();
      if (t !== undefined && TRUE.has(t)) return { ok: true, value: true };
      if (t !== undefined && FALSE.has(t)) return { ok: true, value: false };
      return fail('type', 'expected a boolean (true/false, t/f, yes/no, y/n, 1/0)');
    }
    case 'timestamp': {
      if (text === undefined) return fail('type', `expected an RFC 3339 timestamp, got ${kindOf(value)}`);
      const t = timestamp(text);
      if (typeof t === 'string')
        // Not RFC 3339 at all is `type`; valid RFC 3339 the store cannot hold exactly is `range`.
        return fail(t === 'form' || t === 'calendar' || t === 'leap' ? 'type' : 'range', TIMESTAMP_ERRORS[t]);
      if (col.min !== undefined && t.ms < col.min) return fail('range', `value below the minimum ${col.min}`);
      if (col.max !== undefined && (t.ms > col.max || (t.ms === col.max && t.subMs)))
        return fail('range', `value above the maximum ${col.max}`);
      return { ok: true, value: t.text };
    }
    case 'json': {
      if (text === undefined) return { ok: true, value };
      try {
        return { ok: true, value: JSON.parse(text) };
      } catch {
        return fail('type', 'expected JSON text');
      }
    }
  }
}

const TIMESTAMP_ERRORS = {
  form: 'expected an RFC 3339 date or date-time with offset',
  calendar: 'not a valid calendar date or time',
  leap: 'a leap second (:60) is valid only at 23:59:60 UTC on the last day of a month',
  year: 'year 0000 cannot be stored (PostgreSQL starts at 0001)',
  offset: 'offset beyond ±15:59 cannot be stored (PostgreSQL)',
  precision: 'more than 6 fractional digits (microseconds) cannot be stored exactly',
} as const;

/** What `readTimestamp` found, kept here so that checking a timestamp allocates nothing. */
const stamp = { utcMin: 0, sec: 0, fracStart: 0, fracEnd: 0, dateOnly: false };
/** The text of a timestamp as bytes, for `readTimestamp` (grown when a longer one comes). */
let scratch = Buffer.alloc(64);

/**
 * Validates an RFC 3339 timestamp without a JS `Date` (which keeps only milliseconds), and returns
 * the text to store: the text as sent (every digit kept), or for a date alone its UTC midnight
 * written out, so that a store does not read it in its own time zone. `ms` is the instant in epoch
 * milliseconds (for `min` / `max`), `subMs` whether digits below the millisecond are not zero.
 */
export function timestamp(
  text: string,
): { text: string; ms: number; subMs: boolean } | keyof typeof TIMESTAMP_ERRORS {
  const error = readText(text);
  if (error !== undefined) return error;
  const { utcMin, sec, fracStart, fracEnd, dateOnly } = stamp;
  const digits = fracEnd - fracStart;
  const ms =
    utcMin * 60_000 +
    sec * 1000 +
    (digits === 0 ? 0 : Number(text.slice(fracStart, fracStart + 3).padEnd(3, '0')));
  const subMs = digits > 3 && /[1-9]/.test(text.slice(fracStart + 3, fracEnd));
  return { text: dateOnly ? `${text}T00:00:00Z` : text, ms, subMs };
}

/** True when `text` is a timestamp `timestamp()` accepts (without computing its instant). */
export function isTimestamp(text: string): boolean {
  return readText(text) === undefined;
}

/** `isTimestamp` of the text in `b[start, end)`, read as bytes (no string made). */
export function isTimestampAt(b: Buffer, start: number, end: number): boolean {
  return readTimestamp(b, start, end - start) === undefined;
}

/** `readTimestamp` of a string: RFC 3339 is ASCII, so a string with any other character is not one. */
function readText(text: string): keyof typeof TIMESTAMP_ERRORS | undefined {
  const n = text.length;
  for (let i = 0; i < n; i++) if (text.charCodeAt(i) > 0x7f) return 'form';
  if (n > scratch.length) scratch = Buffer.alloc(n);
  scratch.write(text, 'latin1');
  return readTimestamp(scratch, 0, n);
}

/**
 * Checks the text in `b[o, o + n)` against RFC 3339 and what PostgreSQL can hold; fills `stamp`
 * (fraction positions counted from `o`) when it passes. Reads nothing past `o + n`.
 */
function readTimestamp(b: Buffer, o: number, n: number): keyof typeof TIMESTAMP_ERRORS | undefined {
  // The grammar of RFC 3339 above, read by hand: a regular expression's match array costs more
  // than the rest of the check.
  if (n < 10 || b[o + 4] !== DASH || b[o + 7] !== DASH) return 'form';
  const y100 = twoDigits(b, o);
  const y = y100 < 0 ? -1 : y100 * 100 + twoDigits(b, o + 2);
  const mo = twoDigits(b, o + 5);
  const d = twoDigits(b, o + 8);
  if (y100 < 0 || y < y100 * 100 || mo < 0 || d < 0) return 'form';
  let h = 0;
  let mi = 0;
  let sec = 0;
  let fracStart = 0;
  let fracEnd = 0;
  let sign = 1;
  let oh = 0;
  let om = 0;
  const dateOnly = n === 10;
  if (!dateOnly) {
    const sep = b[o + 10];
    if (sep !== 0x54 && sep !== 0x74 && sep !== 0x20) return 'form'; // T, t, space
    if (n < 20 || b[o + 13] !== COLON || b[o + 16] !== COLON) return 'form';
    h = twoDigits(b, o + 11);
    mi = twoDigits(b, o + 14);
    sec = twoDigits(b, o + 17);
    if (h < 0 || mi < 0 || sec < 0) return 'form';
    let i = 19;
    if (b[o + i] === 0x2e) {
      let j = i + 1;
      while (j < n && isDigit(b[o + j]!)) j++;
      if (j === i + 1) return 'form';
      fracStart = i + 1;
      fracEnd = j;
      i = j;
    }
    const z = i < n ? b[o + i] : -1;
    if (z === 0x5a || z === 0x7a) {
      if (i + 1 !== n) return 'form';
    } else if (z === 0x2b || z === DASH) {
      if (i + 6 !== n || b[o + i + 3] !== COLON) return 'form';
      sign = z === DASH ? -1 : 1;
      oh = twoDigits(b, o + i + 1);
      om = twoDigits(b, o + i + 4);
      if (oh < 0 || om < 0) return 'form';
    } else return 'form';
  }
  // RFC 3339 section 5.7: month 01-12, mday by month and leap year, hour 00-23, minute 00-59,
  // second 00-60, offset hour 00-23 and minute 00-59.
  if (mo < 1 || mo > 12 || d < 1 || d > daysIn(y, mo) || h > 23 || mi > 59 || sec > 60 || oh > 23 || om > 59)
    return 'calendar';
  if (y === 0) return 'year';
  // PostgreSQL refuses a displacement past 15:59 ("time zone displacement out of range", checked
  // on PostgreSQL 15).
  if (oh > 15) return 'offset';
  // PostgreSQL keeps microseconds and rounds the rest: refuse what would not land exactly.
  for (let k = fracStart + 6; k < fracEnd; k++) if (b[o + k] !== 0x30) return 'precision';
  const offsetMin = sign * (oh * 60 + om);
  // Minutes since the epoch of the instant, by calendar arithmetic (a Date costs more per row).
  const utcMin = (daysFromCivil(y, mo, d) * 24 + h) * 60 + mi - offsetMin;
  if (sec === 60) {
    // RFC 3339 section 5.7: a leap second is 23:59:60 UTC (at any offset) on the last day of a month.
    const at = new Date((utcMin + 1) * 60_000);
    if (at.getUTCDate() !== 1 || at.getUTCHours() !== 0 || at.getUTCMinutes() !== 0) return 'leap';
  }
  stamp.utcMin = utcMin;
  stamp.sec = sec;
  stamp.fracStart = fracStart;
  stamp.fracEnd = fracEnd;
  stamp.dateOnly = dateOnly;
  return undefined;
}

/**
 * Days since 1970-01-01 of a date in the proleptic Gregorian calendar, any year (the
 * days-from-civil algorithm of H. Hinnant, "chrono-Compatible Low-Level Date Algorithms").
 */
function daysFromCivil(year: number, month: number, day: number): number {
  const y = month <= 2 ? year - 1 : year;
  const era = Math.floor(y / 400);
  const yoe = y - era * 400;
  const doy = Math.floor((153 * (month > 2 ? month - 3 : month + 9) + 2) / 5) + day - 1;
  const doe = yoe * 365 + Math.floor(yoe / 4) - Math.floor(yoe / 100) + doy;
  return era * 146_097 + doe - 719_468;
}

const DASH = 0x2d;
const COLON = 0x3a;

function isDigit(c: number): boolean {
  return c >= 0x30 && c <= 0x39;
}

/** The two decimal digits at `i`, or -1. */
function twoDigits(bytes: Buffer, i: number): number {
  const a = bytes[i]! - 0x30;
  const b = bytes[i + 1]! - 0x30;
  return a >= 0 && a <= 9 && b >= 0 && b <= 9 ? a * 10 + b : -1;
}

function daysIn(year: number, month: number): number {
  if (month === 2) return year % 4 === 0 && (year % 100 !== 0 || year % 400 === 0) ? 29 : 28;
  return month === 4 || month === 6 || month === 9 || month === 11 ? 30 : 31;
}

function ranged(col: ResolvedColumn, value: unknown, measure: number, what: 'length' | 'value'): Converted {
  if (col.min !== undefined && measure < col.min)
    return fail('range', `${what} below the minimum ${col.min}`);
  if (col.max !== undefined && measure > col.max)
    return fail('range', `${what} above the maximum ${col.max}`);
  return { ok: true, value };
}

function fail(reason: RejectReason, message: string): Converted {
  return { ok: false, reason, message };
}

function kindOf(value: unknown): string {
  if (value === null) return 'null';
  if (Array.isArray(value)) return 'an array';
  return typeof value === 'object' ? 'an object' : `a ${typeof value}`;
}
