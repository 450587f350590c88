/**
 * Splits a byte stream into lines (LF, or CRLF) with their 1-based numbers. A line longer than
 * `maxLineBytes` (measured without its line break) is cut: its first bytes are kept, the rest is
 * skipped up to the next LF, so memory stays bounded whatever the input holds. A UTF-8 byte order
 * mark is skipped at the start of the input only, however the stream is cut; anywhere else it is data.
 */

const LF = 0x0a;
const CR = 0x0d;

export interface LineFrame {
  readonly line: number;
  /** The line without its line break (only the first `maxLineBytes` when `truncated`). */
  readonly bytes: Buffer;
  readonly truncated: boolean;
}

export class LineFramer {
  private parts: Buffer[] = [];
  private size = 0;
  private line = 1;
  private truncated = false;
  private atStart = true;

  constructor(private readonly maxLineBytes: number) {}

  /** The first bytes of the input while they could still be a byte order mark. */
  private head: Buffer | undefined;

  push(input: Buffer): LineFrame[] {
    const out: LineFrame[] = [];
    let chunk = input;
    let from = 0;
    if (this.atStart) {
      chunk = this.head ? Buffer.concat([this.head, chunk]) : chunk;
      this.head = undefined;
      if (chunk.length < 3 && isBomPrefix(chunk)) {
        this.head = chunk;
        return out;
      }
      this.atStart = false;
      // RFC 8259 §8.1: a parser may ignore a leading byte order mark.
      if (chunk[0] === 0xef && chunk[1] === 0xbb && chunk[2] === 0xbf) from = 3;
    }
    for (;;) {
      const lf = chunk.indexOf(LF, from);
      if (lf < 0) break;
      this.take(chunk.subarray(from, lf));
      out.push(this.frame());
      from = lf + 1;
    }
    if (from < chunk.length) this.take(chunk.subarray(from));
    return out;
  }

  /** The last line when the input does not end with LF (jsonlines.org: the last separator is optional). */
  end(): LineFrame[] {
    if (this.atStart) {
      // Input shorter than a byte order mark: what was held back is data.
      this.atStart = false;
      const held = this.head;
      this.head = undefined;
      if (held && held.length > 0) this.push(held);
    }
    return this.size > 0 || this.truncated ? [this.frame()] : [];
  }

  private take(part: Buffer): void {
    if (this.truncated || part.length === 0) return;
    // One byte over the limit is kept so a CR that ends a line of exactly the limit still fits.
    if (this.size + part.length > this.maxLineBytes + 1) {
      const room = Math.max(0, this.maxLineBytes - this.size);
      if (room > 0) this.parts.push(part.subarray(0, room));
      this.size += room;
      this.truncated = true;
      return;
    }
    this.parts.push(part);
    this.size += part.length;
  }

  private frame(): LineFrame {
    let bytes = this.parts.length === 1 ? this.parts[0]! : Buffer.concat(this.parts, this.size);
    let truncated = this.truncated;
    if (!truncated && bytes.length > 0 && bytes[bytes.length - 1] === CR)
      bytes = bytes.subarray(0, bytes.length - 1);
    if (bytes.length > this.maxLineBytes) {
      truncated = true;
      bytes = bytes.subarray(0, this.maxLineBytes);
    }
    const frame = { line: this.line, bytes, truncated };
    this.line++;
    this.parts = [];
    this.size = 0;
    this.truncated = false;
    return frame;
  }
}

function isBomPrefix(chunk: Buffer): boolean {
  const bom = [0xef, 0xbb, 0xbf];
  for (let i = 0; i < chunk.length; i++) if (chunk[i] !== bom[i]) return false;
  return true;
}
