/**
 * Finds the records of an RFC 4180 byte stream without parsing their fields: where each record
 * starts (physical line), where it ends, and whether its quoting is well formed. Well-formed
 * records then go to the field parser, which never sees a record it could fail on.
 *
 * Recovery rules (the README's "Reading rules" states them for users):
 * - A record's extent follows the quotes alone, never the size limit: a record longer than
 *   `maxRecordBytes` is still read to its end (the first line break outside quotes), only its
 *   first `maxRecordBytes` bytes are kept, and it is rejected `too-long`. So the lines inside an
 *   over-long quoted field never land as rows, wherever the limit falls.
 * - A quote RFC 4180 does not allow (inside an unquoted field, text after a closing quote) makes
 *   the quotes of that record meaningless: the record ends at the next line break, `csv-syntax`.
 * - A quote still open at the end of the input makes everything from its record on one
 *   `csv-syntax` reject (its first `maxRecordBytes` bytes kept): a stream cannot be re-read, and
 *   guessing where the quote should have closed could land a partner's inner lines as rows.
 * - The length of a record is measured without its line break (LF or CRLF).
 * - A UTF-8 byte order mark is skipped at the start of the input only; anywhere else it is data.
 *
 * After `frameRuns(width, check)`, consecutive plain records are found in one pass and given as
 * one frame (`rows`): each well formed, of `width` fields, none empty and unquoted, no CR outside
 * quotes but the one of a CRLF line break, not a lone `\.`, within the size limit, whole in the
 * chunk, and passing `check` (typed columns).
 * Their bytes are those of the input, with LF for each CRLF between two of them. Any other record
 * ends the run and is framed alone as before.
 */

const LF = 0x0a;
const CR = 0x0d;
const QUOTE = 0x22;
const BACKSLASH = 0x5c;
const DOT = 0x2e;

/**
 * A check of a plain record's fields in `chunk`: field k spans `fieldAt[k]` to `fieldAt[k + 1] - 1`
 * (quotes included). False ends the run before the record.
 */
export type RecordCheck = (chunk: Buffer, fieldAt: Int32Array) => boolean;

/** One record found in the input. `bytes` excludes the line break. */
export interface CsvFrame {
  readonly line: number;
  readonly bytes: Buffer;
  /** Set when the record is not well formed; `bytes` is then as much as was kept. */
  readonly error?: {
    readonly reason: 'csv-syntax' | 'too-long';
    readonly message: string;
    readonly field: number;
  };
  readonly truncated: boolean;
  /** Set for a run of plain records (`runWidth`): how many, and the line the last one starts on. */
  readonly rows?: { readonly count: number; readonly lastLine: number };
}

interface SyntaxError {
  readonly reason: 'csv-syntax';
  readonly message: string;
  readonly field: number;
}

enum State {
  FieldStart,
  Unquoted,
  Quoted,
  /** A quote inside a quoted field: either the first of a doubled pair or the closing one. */
  QuoteInQuoted,
  /** A CR right after a closing quote: only LF may follow. */
  CrAfterQuote,
  /** The record is malformed: its quotes mean nothing, it ends at the next LF. */
  SkipToLf,
}

const BOM = [0xef, 0xbb, 0xbf];

export class CsvFramer {
  private state = State.FieldStart;
  /** The kept bytes of the current record: at most `maxRecordBytes + 1` (room for a CR of CRLF). */
  private parts: Buffer[] = [];
  private size = 0;
  /** The record is longer than what is kept. */
  private over = false;
  private field = 0;
  private line: number;
  private startLine: number;
  private error: SyntaxError | undefined;
  private atStart: boolean;
  /** Blank lines seen (skipped; RFC 4180 has none, spreadsheets write them). */
  blankLines = 0;
  /** Fields of a plain record, when runs of them are wanted (0: every record framed alone). */
  private runWidth = 0;
  private runCheck: RecordCheck | undefined;
  /** Where each field of the record being scanned starts, and (last) where its line break is. */
  private fieldAt = new Int32Array(1);
  /** Where the CRs of CRLF line breaks inside the run being scanned are, from its start. */
  private readonly runCrs: number[] = [];

  /**
   * `firstLine` and `input` serve framing part of an input again (`CsvRun.lines()`): the line the
   * bytes start on, and whether they start the input (a byte order mark is skipped only there).
   */
  constructor(
    private readonly delimiter: number,
    private readonly maxRecordBytes: number,
    firstLine = 1,
    input = true,
  ) {
    this.line = firstLine;
    this.startLine = firstLine;
    this.atStart = input;
  }

  /**
   * From the next chunk on, frames runs of plain records of `width` fields that pass `check` too
   * (see the class comment).
   */
  frameRuns(width: number, check?: RecordCheck): void {
    this.runWidth = width;
    this.runCheck = check;
    this.fieldAt = new Int32Array(width + 1);
  }

  /** The physical line the reader is on (1-based). */
  get currentLine(): number {
    return this.line;
  }

  /** The frames completed by this chunk, in order. */
  push(chunk: Buffer): CsvFrame[] {
    const out: CsvFrame[] = [];
    let i = 0;
    if (this.atStart) {
      const pending = this.parts.length > 0 ? Buffer.concat([...this.parts, chunk]) : chunk;
      this.parts = [];
      this.size = 0;
      if (pending.length < 3 && isBomPrefix(pending)) {
        // Fewer bytes than a BOM so far: wait to know whether they are one.
        this.keep(pending);
        return out;
      }
      this.atStart = false;
      chunk = pending;
      // A UTF-8 byte order mark is not data (RFC 3629, section 6).
      if (chunk[0] === 0xef && chunk[1] === 0xbb && chunk[2] === 0xbf) i = 3;
    }
    let segStart = i;
    const delim = this.delimiter;
    const n = chunk.length;
    // Where the next line break and quote are (n: none in this chunk), found by native search.
    let nextLf = -1;
    let nextQuote = -1;
    for (; i < n; i++) {
      if (i === segStart && this.runWidth > 0 && this.state === State.FieldStart && this.size === 0) {
        const end = this.scanRun(out, chunk, i, n);
        if (end > i) {
          segStart = end;
          i = end - 1;
          continue;
        }
      }
      if (this.state === State.FieldStart || this.state === State.Unquoted) {
        // No quote is open: when none comes before the next line break, the rest of the record
        // is plain text and ends there, whatever it holds (most records of a file).
        if (nextLf < i) nextLf = indexOr(chunk, LF, i, n);
        if (nextQuote < i) nextQuote = indexOr(chunk, QUOTE, i, n);
        if (nextLf < nextQuote) {
          i = nextLf;
          this.emit(out, chunk, segStart, i);
          segStart = i + 1;
          continue;
        }
      }
      const b = chunk[i]!;
      switch (this.state) {
        case State.FieldStart:
          if (b === QUOTE) this.state = State.Quoted;
          else if (b === delim) this.field++;
          else if (b === LF) {
            this.emit(out, chunk, segStart, i);
            segStart = i + 1;
          } else this.state = State.Unquoted;
          break;
        case State.Unquoted: {
          // Most bytes of a file are here: run to the next byte that matters.
          while (i + 1 < n) {
            const c = chunk[i]!;
            if (c === delim || c === LF || c === QUOTE) break;
            i++;
          }
          const c = chunk[i]!;
          if (c === delim) {
            this.field++;
            this.state = State.FieldStart;
          } else if (c === LF) {
            this.emit(out, chunk, segStart, i);
            segStart = i + 1;
          } else if (c === QUOTE) this.bad('a quote inside an unquoted field (RFC 4180 §2.5)');
          break;
        }
        case State.Quoted: {
          const q = chunk.indexOf(QUOTE, i);
          const stop = q < 0 ? n : q;
          // Line breaks inside quotes are data, but they still count as physical lines.
          for (let k = chunk.indexOf(LF, i); k >= 0 && k < stop; k = chunk.indexOf(LF, k + 1)) this.line++;
          if (q < 0) i = n - 1;
          else {
            i = q;
            this.state = State.QuoteInQuoted;
          }
          break;
        }
        case State.QuoteInQuoted:
          if (b === QUOTE) this.state = State.Quoted;
          else if (b === delim) {
            this.field++;
            this.state = State.FieldStart;
          } else if (b === LF) {
            this.emit(out, chunk, segStart, i);
            segStart = i + 1;
          } else if (b === CR) this.state = State.CrAfterQuote;
          else this.bad('text after a closing quote (RFC 4180 §2.7)');
          break;
        case State.CrAfterQuote:
          if (b === LF) {
            this.emit(out, chunk, segStart, i);
            segStart = i + 1;
          } else this.bad('a CR after a closing quote not followed by LF');
          break;
        case State.SkipToLf: {
          const lf = chunk.indexOf(LF, i);
          if (lf < 0) i = n - 1;
          else {
            i = lf;
            this.emit(out, chunk, segStart, i);
            segStart = i + 1;
          }
          break;
        }
      }
    }
    if (segStart < n) this.keep(chunk.subarray(segStart));
    return out;
  }

  /** The last record, when the input does not end with a line break (RFC 4180 §2.2 allows it). */
  end(): CsvFrame[] {
    const out: CsvFrame[] = [];
    if (this.atStart) {
      // Input shorter than a byte order mark: what was held back is data.
      this.atStart = false;
      const held = this.parts.length > 0 ? Buffer.concat(this.parts) : Buffer.alloc(0);
      this.parts = [];
      this.size = 0;
      if (held.length > 0) out.push(...this.push(held));
    }
    if (this.state === State.Quoted) {
      // Everything from the record's first line on is one reject, its trailing CR included (the
      // CR is inside the quote: data).
      this.error = {
        reason: 'csv-syntax',
        message: 'a quoted field is not closed at the end of the input',
        field: this.field,
      };
      this.emit(out, Buffer.alloc(0), 0, 0, true, false);
    } else if (this.size > 0 || this.error) this.emit(out, Buffer.alloc(0), 0, 0, true);
    return out;
  }

  /**
   * Frames the plain records from `from` on (see the class comment) as one run; returns where the
   * first record that is not plain starts (`from` when there is none).
   */
  private scanRun(out: CsvFrame[], chunk: Buffer, from: number, n: number): number {
    const delim = this.delimiter;
    const width = this.runWidth;
    const max = this.maxRecordBytes;
    const check = this.runCheck;
    const fieldAt = this.fieldAt;
    const crs = this.runCrs;
    crs.length = 0;
    let p = from;
    let end = from;
    let count = 0;
    let line = this.line;
    let lastLine = line;
    records: while (p < n) {
      let fields = 1;
      let quoted = false;
      let fieldStart = true;
      let innerLines = 0;
      let crlf = false;
      let i = p;
      fieldAt[0] = p;
      for (; i < n; i++) {
        const c = chunk[i]!;
        if (quoted) {
          if (c === QUOTE) {
            if (i + 1 >= n) break records;
            const d = chunk[i + 1]!;
            if (d === QUOTE) i++;
            else if (d === delim || d === LF || d === CR) quoted = false;
            else break records;
          } else if (c === LF) innerLines++;
          continue;
        }
        if (c === delim) {
          if (fieldStart || fields === width) break records;
          fieldAt[fields++] = i + 1;
          fieldStart = true;
          continue;
        }
        if (c === LF) break;
        if (c === QUOTE) {
          if (!fieldStart) break records;
          quoted = true;
          fieldStart = false;
          continue;
        }
        if (c === CR) {
          if (i + 1 < n && chunk[i + 1] === LF) {
            crlf = true;
            i++;
            break;
          }
          break records;
        }
        fieldStart = false;
      }
      // Whole in the chunk, no empty last field (a blank line neither), the header's width.
      if (i >= n || fieldStart || fields !== width) break;
      const recordEnd = crlf ? i - 1 : i;
      const length = recordEnd - p;
      if (length > max || (length === 2 && chunk[p] === BACKSLASH && chunk[p + 1] === DOT)) break;
      fieldAt[width] = recordEnd + 1;
      if (check !== undefined && !check(chunk, fieldAt)) break;
      if (count > 0 && chunk[end] === CR) crs.push(end - from);
      count++;
      lastLine = line;
      line += 1 + innerLines;
      end = recordEnd;
      p = i + 1;
    }
    if (count === 0) return from;
    out.push({
      line: this.line,
      bytes: crs.length === 0 ? chunk.subarray(from, end) : withoutCrs(chunk, from, end, crs),
      truncated: false,
      rows: { count, lastLine },
    });
    this.line = line;
    this.startLine = line;
    return p;
  }

  /** Keeps bytes of the current record, up to `maxRecordBytes + 1`. */
  private keep(part: Buffer): void {
    if (part.length === 0 || this.over) return;
    const room = this.maxRecordBytes + 1 - this.size;
    if (part.length > room) {
      if (room > 0) this.parts.push(part.subarray(0, room));
      this.size += room;
      this.over = true;
      return;
    }
    this.parts.push(part);
    this.size += part.length;
  }

  private bad(message: string): void {
    if (!this.error) this.error = { reason: 'csv-syntax', message, field: this.field };
    this.state = State.SkipToLf;
  }

  private emit(
    out: CsvFrame[],
    chunk: Buffer,
    from: number,
    to: number,
    atEnd = false,
    lineBreak = true,
  ): void {
    if (from < to) this.keep(chunk.subarray(from, to));
    let bytes = this.parts.length === 1 ? this.parts[0]! : Buffer.concat(this.parts, this.size);
    // The CR of a CRLF line break is not data, and does not count towards the limit.
    if (lineBreak && !this.over && bytes.length > 0 && bytes[bytes.length - 1] === CR)
      bytes = bytes.subarray(0, bytes.length - 1);
    const max = this.maxRecordBytes;
    const tooLong = this.over || bytes.length > max;
    if (bytes.length === 0 && !this.error) this.blankLines++;
    else if (this.error) {
      out.push({
        line: this.startLine,
        bytes: tooLong ? bytes.subarray(0, max) : bytes,
        error: this.error,
        truncated: tooLong,
      });
    } else if (tooLong) {
      out.push({
        line: this.startLine,
        bytes: bytes.subarray(0, max),
        error: {
          reason: 'too-long',
          message: `record longer than ${max} bytes`,
          field: fieldAt(bytes, max, this.delimiter),
        },
        truncated: true,
      });
    } else out.push({ line: this.startLine, bytes, truncated: false });
    this.parts = [];
    this.size = 0;
    this.over = false;
    this.field = 0;
    this.error = undefined;
    this.state = State.FieldStart;
    if (!atEnd) this.line++;
    this.startLine = this.line;
  }
}

/** `chunk[from, end)` without the bytes at `from + crs[k]` (ascending). */
export function withoutCrs(chunk: Buffer, from: number, end: number, crs: readonly number[]): Buffer {
  const out = Buffer.allocUnsafe(end - from - crs.length);
  let o = 0;
  let at = from;
  for (const cr of crs) {
    o += chunk.copy(out, o, at, from + cr);
    at = from + cr + 1;
  }
  chunk.copy(out, o, at, end);
  return out;
}

/** The 0-based field that byte `pos` of a well-quoted record falls in. */
function fieldAt(bytes: Buffer, pos: number, delim: number): number {
  let field = 0;
  let quoted = false;
  for (let i = 0; i < pos && i < bytes.length; i++) {
    const b = bytes[i];
    if (b === QUOTE) quoted = !quoted;
    else if (b === delim && !quoted) field++;
  }
  return field;
}

/** The index of `byte` in `chunk` from `from` on, or `n` when there is none. */
function indexOr(chunk: Buffer, byte: number, from: number, n: number): number {
  const at = chunk.indexOf(byte, from);
  return at < 0 ? n : at;
}

function isBomPrefix(chunk: Buffer): boolean {
  for (let i = 0; i < chunk.length; i++) if (chunk[i] !== BOM[i]) return false;
  return true;
}
