import { invalidOption } from '@spillway/core';
import type { RejectReason } from './reject.js';

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
 * property or `null` does. Missing optional columns become `null`.
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
}

export type Converted = { ok: true; value: unknown } | { ok: false; reason: RejectReason; message: string };

// Source: RFC 3339, section 5.6 "Internet Date/Time Format": full-date, or full-date "T" full-time
// with a required offset (the RFC's note allows a space instead of "T"). No offset, no guess.
const RFC3339 = /^(\d{4})-(\d{2})-(\d{2})(?:[Tt ](\d{2}):(\d{2}):(\d{2})(\.\d+)?([Zz]|[+-]\d{2}:\d{2}))?$/;
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
    if (s.required !== undefined && typeof s.required !== 'boolean')
      throw invalidOption(`${at}.required`, 'a boolean', s.required);
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
      required: s.required === true,
      pattern,
      min: s.min as number | undefined,
      max: s.max as number | undefined,
      enum: s.enum ? new Set(s.enum as string[]) : undefined,
    };
  });
}

/** True when a value counts as missing: absent, null, or (text) empty. */
export function isMissing(value: unknown): boolean {
  return value === undefined || value === null || value === '';
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
      const m = RFC3339.exec(text);
      if (!m) return fail('type', 'expected an RFC 3339 date or date-time with offset');
      const [y, mo, day, h = 0, mi = 0, sec = 0] = [1, 2, 3, 4, 5, 6].map((i) =>
        m[i] === undefined ? undefined : Number(m[i]),
      );
      // Days past the 28th are checked against the month's length (Date.parse would roll over).
      const tooLate = day! > 28 && day! > new Date(Date.UTC(y!, mo!, 0)).getUTCDate();
      if (mo! < 1 || mo! > 12 || day! < 1 || tooLate || h > 23 || mi > 59 || sec > 60) {
        return fail('type', 'not a valid calendar date or time');
      }
      const ms = Date.parse(m[4] === undefined ? `${text}T00:00:00Z` : text.replace(' ', 'T'));
      if (Number.isNaN(ms)) return fail('type', 'not a valid calendar date or time');
      const d = new Date(ms);
      return ranged(col, d, ms, 'value');
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
