import { isUtf8 } from 'node:buffer';
import { splitRecords } from './csv-fields.js';
import { type CsvFrame, CsvFramer, type RecordCheck } from './csv-framer.js';
import { LineFramer } from './line-framer.js';
import type { RejectReason } from './reject.js';

/** One data row found in the input, parsed but not yet validated, or why it could not be. */
export type Item =
  | { readonly kind: 'fields'; readonly line: number; readonly raw: Buffer; readonly fields: string[] }
  /** A well-formed UTF-8 CSV record left as its bytes (`csvReader` with `lines`). */
  | { readonly kind: 'line'; readonly line: number; readonly raw: Buffer }
  /**
   * Consecutive plain UTF-8 records of the header's width, as their bytes with LF between them
   * (`csvReader` with `runs`; see `CsvFramer.runWidth`).
   */
  | { readonly kind: 'run'; readonly line: number; readonly raw: Buffer; readonly count: number }
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
  /** CSV: from the next chunk on, give runs of plain records (`CsvFramer.frameRuns`). */
  frameRuns?(width: number, check?: RecordCheck): void;
  end(): Item[];
  readonly blankLines: number;
  readonly lastLine: number;
}

const LF = Buffer.from('\n');

/**
 * CSV: the framer finds records and isolates malformed ones; the well-formed records of a chunk
 * are then decoded at once and split into fields in one call. With `lines`, every well-formed
 * record after the first (the header) is left as its bytes instead (kind `line`). Once told
 * (`frameRuns`), consecutive plain records come as one item (kind `run`).
 */
export function csvReader(delimiter: number, maxRowBytes: number, lines = false): ItemReader {
  let runs = false;
  const framer = new CsvFramer(delimiter, maxRowBytes);
  let lastLine = 0;
  let first = true;
  /** The frames, with each run that is not all UTF-8 framed again record by record. */
  const utf8Runs = (frames: CsvFrame[]): CsvFrame[] => {
    let out: CsvFrame[] | undefined;
    for (let i = 0; i < frames.length; i++) {
      const f = frames[i]!;
      if (f.rows && !isUtf8(f.bytes)) {
        out ??= frames.slice(0, i);
        const again = new CsvFramer(delimiter, maxRowBytes, f.line, false);
        out.push(...again.push(f.bytes), ...again.end());
      } else out?.push(f);
    }
    return out ?? frames;
  };
  const items = (framed: CsvFrame[]): Item[] => {
    const frames = runs ? utf8Runs(framed) : framed;
    const out: Item[] = new Array(frames.length);
    const good: number[] = [];
    for (let i = 0; i < frames.length; i++) {
      const f = frames[i]!;
      lastLine = f.line;
      if (f.rows) {
        lastLine = f.rows.lastLine;
        out[i] = { kind: 'run', line: f.line, raw: f.bytes, count: f.rows.count };
        continue;
      }
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
          field: badUtf8Field(f.bytes, delimiter),
          truncated: false,
        };
      } else if (lines && !first) out[i] = { kind: 'line', line: f.line, raw: f.bytes };
      else good.push(i);
      first = false;
    }
    if (good.length === 0) return out;
    const parts: Buffer[] = new Array(good.length * 2);
    for (let k = 0; k < good.length; k++) {
      parts[2 * k] = frames[good[k]!]!.bytes;
      parts[2 * k + 1] = LF;
    }
    const records = splitRecords(Buffer.concat(parts).toString('utf8'), delimiter);
    for (let k = 0; k < good.length; k++) {
      const f = frames[good[k]!]!;
      out[good[k]!] = { kind: 'fields', line: f.line, raw: f.bytes, fields: records[k]! };
    }
    return out;
  };
  return {
    push: (chunk) => items(framer.push(chunk)),
    end: () => items(framer.end()),
    frameRuns(width, check) {
      runs = true;
      framer.frameRuns(width, check);
    },
    get blankLines() {
      return framer.blankLines;
    },
    get lastLine() {
      return lastLine;
    },
  };
}

/** Index of the first field holding bytes that are not UTF-8 (slow path, bad rows only). */
function badUtf8Field(bytes: Buffer, delimiter: number): number | undefined {
  // latin1 maps each byte to one character, so a field's bytes come back unchanged.
  const [fields] = splitRecords(bytes.toString('latin1'), delimiter);
  const i = fields?.findIndex((f) => !isUtf8(Buffer.from(f, 'latin1')));
  return i === undefined || i < 0 ? undefined : i;
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
