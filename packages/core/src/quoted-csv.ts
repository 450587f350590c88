/**
 * A string written as one quoted CSV field in UTF-8 straight into a buffer, for writers of COPY
 * or CSV data that build their bytes without a string per field: `"`, the string with each `"`
 * in it doubled, `"` (RFC 4180, section 2, rules 5–7). That is also how PostgreSQL's
 * `COPY … (FORMAT csv)` reads a non-null value (PostgreSQL documentation, COPY, "CSV Format"):
 * quoted, a comma, a line break or `\.` inside stays data, and `""` is the empty string.
 *
 * A lone surrogate (one half of a UTF-16 pair without the other) has no UTF-8 form (RFC 3629,
 * section 3, which excludes U+D800–U+DFFF): it is written as U+FFFD, the bytes EF BF BD, which is
 * what `Buffer.from(string)` writes for it. So the byte-by-byte and the native way below give the
 * same bytes, and a row with a lone surrogate lands (with U+FFFD) instead of being refused:
 * PostgreSQL refuses the bytes a surrogate would otherwise take (ED A0 80 for U+D800) with
 * 22021, "invalid byte sequence for encoding UTF8" (seen on PostgreSQL 15).
 */

/** Longer strings are quoted as strings and written by the native UTF-8 encoder. */
const NATIVE_ABOVE = 256;
const QUOTE = 0x22;
const QUOTES = /"/g;

/**
 * The most bytes `writeQuotedCsv` writes for a string of `length` UTF-16 units: 3 per unit (a
 * doubled quote is 2, each unit of a surrogate pair 2, any other at most 3), and the two quotes.
 */
export function quotedCsvBound(length: number): number {
  return 3 * length + 2;
}

/**
 * Writes `s` as a quoted CSV field at `buf[at]` and returns where it ends. The caller makes room
 * first: `quotedCsvBound(s.length)` bytes from `at`. Short strings go byte by byte, which is
 * cheaper than a native call for the short values most rows hold.
 */
export function writeQuotedCsv(buf: Buffer, at: number, s: string): number {
  if (s.length > NATIVE_ABOVE) {
    const field = s.includes('"') ? `"${s.replace(QUOTES, '""')}"` : `"${s}"`;
    return at + buf.write(field, at, 'utf8');
  }
  buf[at++] = QUOTE;
  // The UTF-8 encoder is written out here rather than called per character: a call in this loop
  // cost 9–21 % more CPU per NDJSON row in a micro-benchmark, even when V8 inlined it.
  for (let i = 0; i < s.length; i++) {
    let c = s.charCodeAt(i);
    if (c < 0x80) {
      if (c === QUOTE) buf[at++] = QUOTE;
      buf[at++] = c;
    } else if (c < 0x800) {
      buf[at++] = 0xc0 | (c >> 6);
      buf[at++] = 0x80 | (c & 0x3f);
    } else {
      if (c >= 0xd800 && c <= 0xdfff) {
        const d = i + 1 < s.length ? s.charCodeAt(i + 1) : 0;
        if (c <= 0xdbff && d >= 0xdc00 && d <= 0xdfff) {
          const cp = 0x10000 + ((c - 0xd800) << 10) + (d - 0xdc00);
          buf[at++] = 0xf0 | (cp >> 18);
          buf[at++] = 0x80 | ((cp >> 12) & 0x3f);
          buf[at++] = 0x80 | ((cp >> 6) & 0x3f);
          buf[at++] = 0x80 | (cp & 0x3f);
          i++;
          continue;
        }
        c = 0xfffd;
      }
      buf[at++] = 0xe0 | (c >> 12);
      buf[at++] = 0x80 | ((c >> 6) & 0x3f);
      buf[at++] = 0x80 | (c & 0x3f);
    }
  }
  buf[at++] = QUOTE;
  return at;
}
