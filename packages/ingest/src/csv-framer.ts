/**
 * Finds the records of an RFC 4180 byte stream without parsing their fields: where each record
 * starts (physical line), where it ends, and whether its quoting is well formed. A malformed or
 * oversized record is cut at the next line break and reported, so one bad row never swallows the
 * rows after it and memory stays bounded by `maxRecordBytes`. Well-formed records then go to
 * csv-parse, which never sees a record it could fail on.
 */

const LF = 0x0a;
const CR = 0x0d;
const QUOTE = 0x22;

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
}

enum State {
  FieldStart,
  Unquoted,
  Quoted,
  /** A quote inside a quoted field: either the first of a doubled pair or the closing one. */
  QuoteInQuoted,
  /** A CR right after a closing quote: only LF may follow. */
  CrAfterQuote,
  /** The record is bad: skip to the next LF whatever the quotes say. */
  SkipToLf,
}

export class CsvFramer {
  private state = State.FieldStart;
  private parts: Buffer[] = [];
  private size = 0;
  private field = 0;
  private line = 1;
  private startLine = 1;
  private error: CsvFrame['error'];
  private truncated = false;
  private atStart = true;
  /** Blank lines seen (skipped; RFC 4180 has none, spreadsheets write them). */
  blankLines = 0;

  constructor(
    private readonly delimiter: number,
    private readonly maxRecordBytes: number,
  ) {}

  /** The frames completed by this chunk, in order. */
  push(chunk: Buffer): CsvFrame[] {
    return this.feed(chunk, false);
  }

  private feed(input: Buffer, final: boolean): CsvFrame[] {
    const out: CsvFrame[] = [];
    let chunk = input;
    let i = 0;
    if (this.atStart) {
      const pending = this.parts.length > 0 ? Buffer.concat([...this.parts, chunk]) : chunk;
      this.parts = [];
      this.size = 0;
      if (!final && pending.length < 3 && isBomPrefix(pending)) {
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
    for (; i < chunk.length; i++) {
      const b = chunk[i]!;
      switch (this.state) {
        case State.FieldStart:
          if (b === QUOTE) this.state = State.Quoted;
          else if (b === delim) this.field++;
          else if (b === LF) {
            this.emit(out, chunk, segStart, i);
            segStart = i + 1;
            continue;
          } else this.state = State.Unquoted;
          break;
        case State.Unquoted:
          if (b === delim) {
            this.field++;
            this.state = State.FieldStart;
          } else if (b === LF) {
            this.emit(out, chunk, segStart, i);
            segStart = i + 1;
            continue;
          } else if (b === QUOTE) this.bad('csv-syntax', 'a quote inside an unquoted field (RFC 4180 §2.5)');
          break;
        case State.Quoted:
          if (b === QUOTE) this.state = State.QuoteInQuoted;
          else if (b === LF) this.line++;
          break;
        case State.QuoteInQuoted:
          if (b === QUOTE) this.state = State.Quoted;
          else if (b === delim) {
            this.field++;
            this.state = State.FieldStart;
          } else if (b === LF) {
            this.emit(out, chunk, segStart, i);
            segStart = i + 1;
            continue;
          } else if (b === CR) this.state = State.CrAfterQuote;
          else this.bad('csv-syntax', 'text after a closing quote (RFC 4180 §2.7)');
          break;
        case State.CrAfterQuote:
          if (b === LF) {
            this.emit(out, chunk, segStart, i);
            segStart = i + 1;
            continue;
          }
          this.bad('csv-syntax', 'a CR after a closing quote not followed by LF');
          break;
        case State.SkipToLf:
          if (b === LF) {
            this.emit(out, chunk, segStart, i);
            segStart = i + 1;
            continue;
          }
          break;
      }
      // Bound memory: past the limit keep nothing more of this record, and resynchronise at the
      // next line break (an unclosed quote would otherwise make the rest of the input one record).
      if (!this.truncated && this.size + (i + 1 - segStart) > this.maxRecordBytes) {
        this.keep(chunk.subarray(segStart, segStart + (this.maxRecordBytes - this.size)));
        segStart = i + 1;
        this.truncated = true;
        if (!this.error)
          this.error = {
            reason: 'too-long',
            message: `record longer than ${this.maxRecordBytes} bytes`,
            field: this.field,
          };
        this.state = State.SkipToLf;
      }
    }
    if (!this.truncated && segStart < chunk.length) this.keep(chunk.subarray(segStart));
    return out;
  }

  /** The last record, when the input does not end with a line break (RFC 4180 §2.2 allows it). */
  end(): CsvFrame[] {
    const out: CsvFrame[] = [];
    if (this.atStart) out.push(...this.feed(Buffer.alloc(0), true));
    if (this.state === State.Quoted)
      this.bad('csv-syntax', 'a quoted field is not closed at the end of the input');
    if (this.size > 0 || this.error) this.emit(out, Buffer.alloc(0), 0, 0, true);
    return out;
  }

  private keep(part: Buffer): void {
    if (part.length === 0) return;
    this.parts.push(part);
    this.size += part.length;
  }

  private bad(reason: 'csv-syntax' | 'too-long', message: string): void {
    if (!this.error) this.error = { reason, message, field: this.field };
    this.state = State.SkipToLf;
  }

  private emit(out: CsvFrame[], chunk: Buffer, from: number, to: number, atEnd = false): void {
    if (!this.truncated) this.keep(chunk.subarray(from, to));
    let bytes = this.parts.length === 1 ? this.parts[0]! : Buffer.concat(this.parts, this.size);
    // The CR of a CRLF line break is not data.
    if (
      !this.truncated &&
      bytes.length > 0 &&
      bytes[bytes.length - 1] === CR &&
      this.state !== State.Quoted
    ) {
      bytes = bytes.subarray(0, bytes.length - 1);
    }
    if (bytes.length === 0 && !this.error) this.blankLines++;
    else {
      const frame: CsvFrame = this.error
        ? { line: this.startLine, bytes, error: this.error, truncated: this.truncated }
        : { line: this.startLine, bytes, truncated: false };
      out.push(frame);
    }
    this.parts = [];
    this.size = 0;
    this.field = 0;
    this.error = undefined;
    this.truncated = false;
    this.state = State.FieldStart;
    if (!atEnd) this.line++;
    this.startLine = this.line;
  }
}

function isBomPrefix(chunk: Buffer): boolean {
  const bom = [0xef, 0xbb, 0xbf];
  for (let i = 0; i < chunk.length; i++) if (chunk[i] !== bom[i]) return false;
  return true;
}
