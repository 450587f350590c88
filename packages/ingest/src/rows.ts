import { isUtf8 } from 'node:buffer';
import { parse } from 'csv-parse/sync';
import { type CsvFrame, CsvFramer } from './csv-framer.js';
import { LineFramer } from './line-framer.js';
import type { RejectReason } from './reject.js';

/** One data row found in the input, parsed but not yet validated, or why it could not be. */
export type Item =
  | { readonly kind: 'fields'; readonly line: number; readonly raw: Buffer; readonly fields: string[] }
  | { readonly kind: 'value'; readonly line: number; readonly raw: Buffer; readonly value: unknown }
  | { readonly kind: 'blank'; readonly line: number }
  | {
      readonly kind: 'reject';
      readonly line: number;
      readonly raw: Buffer;
      readonly reason: RejectReason;
      readonly message: string;
      readonly field: number | undefined;
      readonly truncated: boolean;
    };

/** Turns chunks of input into items; `end()` returns the last ones. */
export interface ItemReader {
  push(chunk: Buffer): Item[];
  end(): Item[];
  readonly blankLines: number;
  readonly lastLine: number;
}

const LF = Buffer.from('\n');

/**
 * CSV: the framer finds records and isolates malformed ones; csv-parse turns each chunk's
 * well-formed records into fields in one call (a call per record costs about 30 µs in setup).
 */
export function csvReader(delimiter: number, maxRowBytes: number): ItemReader {
  const framer = new CsvFramer(delimiter, maxRowBytes);
  const options = {
    delimiter: String.fromCharCode(delimiter),
    quote: '"',
    escape: '"',
    record_delimiter: '\n',
    relax_column_count: true,
    skip_empty_lines: false,
    bom: false,
  } as const;
  let lastLine = 0;
  const items = (frames: CsvFrame[]): Item[] => {
    const out: Item[] = new Array(frames.length);
    const good: number[] = [];
    for (let i = 0; i < frames.length; i++) {
      const f = frames[i]!;
      lastLine = f.line;
      if (f.error) {
        out[i] = {
          kind: 'reject',
          line: f.line,
          raw: f.bytes,
          reason: f.error.reason,
          message: f.error.message,
          field: f.error.field,
          truncated: f.truncated,
        };
      } else if (!isUtf8(f.bytes)) {
        out[i] = {
          kind: 'reject',
          line: f.line,
          raw: f.bytes,
          reason: 'utf8',
          message: 'not valid UTF-8',
          field: badUtf8Field(f.bytes, options),
          truncated: false,
        };
      } else good.push(i);
    }
    if (good.length === 0) return out;
    const parts: Buffer[] = [];
    for (const i of good) parts.push(frames[i]!.bytes, LF);
    let records: string[][] | undefined;
    try {
      records = parse(Buffer.concat(parts), options) as string[][];
    } catch {
      records = undefined;
    }
    if (records && records.length === good.length) {
      for (let k = 0; k < good.length; k++) {
        const f = frames[good[k]!]!;
        out[good[k]!] = { kind: 'fields', line: f.line, raw: f.bytes, fields: records[k]! };
      }
      return out;
    }
    // The framer and csv-parse disagree about a record in this chunk: parse one by one so only
    // that record is rejected.
    for (const i of good) {
      const f = frames[i]!;
      try {
        const one = parse(f.bytes, options) as string[][];
        if (one.length !== 1) throw new RangeError('not one record');
        out[i] = { kind: 'fields', line: f.line, raw: f.bytes, fields: one[0]! };
      } catch {
        out[i] = {
          kind: 'reject',
          line: f.line,
          raw: f.bytes,
          reason: 'csv-syntax',
          message: 'csv-parse refused the record',
          field: undefined,
          truncated: false,
        };
      }
    }
    return out;
  };
  return {
    push: (chunk) => items(framer.push(chunk)),
    end: () => items(framer.end()),
    get blankLines() {
      return framer.blankLines;
    },
    get lastLine() {
      return lastLine;
    },
  };
}

/** Index of the first field holding bytes that are not UTF-8 (slow path, bad rows only). */
function badUtf8Field(bytes: Buffer, options: Record<string, unknown>): number | undefined {
  try {
    const [fields] = parse(bytes, { ...options, encoding: 'latin1' }) as string[][];
    const i = fields?.findIndex((f) => !isUtf8(Buffer.from(f, 'latin1')));
    return i === undefined || i < 0 ? undefined : i;
  } catch {
    return undefined;
  }
}

const WHITESPACE = /^[ \t\r]*$/;

/** NDJSON / JSON Lines: one JSON value per line, UTF-8 (jsonlines.org). */
export function ndjsonReader(maxRowBytes: number): ItemReader {
  const framer = new LineFramer(maxRowBytes);
  // ignoreBOM keeps a BOM inside the input as data (the framer skips the one at the start), so a
  // line that starts with one is not JSON, the same rule as CSV.
  const decoder = new TextDecoder('utf-8', { fatal: true, ignoreBOM: true });
  let blankLines = 0;
  let lastLine = 0;
  const items = (frames: ReturnType<LineFramer['push']>): Item[] => {
    const out: Item[] = new Array(frames.length);
    for (let i = 0; i < frames.length; i++) {
      const f = frames[i]!;
      lastLine = f.line;
      const reject = (reason: RejectReason, message: string): Item => ({
        kind: 'reject',
        line: f.line,
        raw: f.bytes,
        reason,
        message,
        field: undefined,
        truncated: f.truncated,
      });
      if (f.truncated) {
        out[i] = reject('too-long', `line longer than ${maxRowBytes} bytes`);
        continue;
      }
      let text: string;
      try {
        text = decoder.decode(f.bytes);
      } catch {
        out[i] = reject('utf8', 'not valid UTF-8');
        continue;
      }
      if (WHITESPACE.test(text)) {
        blankLines++;
        out[i] = { kind: 'blank', line: f.line };
        continue;
      }
      let value: unknown;
      try {
        value = JSON.parse(text);
      } catch (error) {
        // V8's message quotes the input; keep only the position.
        const at = /position (\d+)/.exec(String((error as Error).message));
        out[i] = reject('json', at ? `not valid JSON (at character ${at[1]})` : 'not valid JSON');
        continue;
      }
      out[i] = { kind: 'value', line: f.line, raw: f.bytes, value };
    }
    return out;
  };
  return {
    push: (chunk) => items(framer.push(chunk)),
    end: () => items(framer.end()),
    get blankLines() {
      return blankLines;
    },
    get lastLine() {
      return lastLine;
    },
  };
}
