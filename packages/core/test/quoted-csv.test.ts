import { describe, expect, it } from 'vitest';
import { quotedCsvBound, writeQuotedCsv } from '../src/kit.js';

/** The bytes `writeQuotedCsv` writes for `s`, checked against the bound it promises. */
function quoted(s: string): Buffer {
  const buf = Buffer.alloc(quotedCsvBound(s.length) + 8, 0xaa);
  const end = writeQuotedCsv(buf, 4, s);
  expect(end - 4).toBeLessThanOrEqual(quotedCsvBound(s.length));
  // Nothing written outside [4, end).
  expect(buf.subarray(0, 4).every((b) => b === 0xaa)).toBe(true);
  expect(buf.subarray(end).every((b) => b === 0xaa)).toBe(true);
  return buf.subarray(4, end);
}

const hex = (b: Buffer) => b.toString('hex');
const bytes = (...xs: number[]) => Buffer.from(xs).toString('hex');

describe('writeQuotedCsv: one quoted CSV field as UTF-8', () => {
  // Source: RFC 4180, section 2, rules 5–7: a field may be enclosed in double quotes; one holding
  // a line break (CRLF), a double quote or a comma must be; a double quote inside is written twice.
  it('doubles a quote inside the field (RFC 4180, 2.7: "b""bb")', () => {
    expect(quoted('b"bb').toString('latin1')).toBe('"b""bb"');
    expect(hex(quoted('b"bb'))).toBe(bytes(0x22, 0x62, 0x22, 0x22, 0x62, 0x62, 0x22));
    expect(quoted('"').toString('latin1')).toBe('""""');
  });

  it('keeps a CRLF, a lone CR or LF, and a comma inside the quotes (RFC 4180, 2.6: "b CRLF bb")', () => {
    expect(hex(quoted('b\r\nbb'))).toBe(bytes(0x22, 0x62, 0x0d, 0x0a, 0x62, 0x62, 0x22));
    expect(hex(quoted('a\rb\nc'))).toBe(bytes(0x22, 0x61, 0x0d, 0x62, 0x0a, 0x63, 0x22));
    expect(quoted('aaa,bbb').toString('latin1')).toBe('"aaa,bbb"');
  });

  it('writes the empty string as two quotes (a quoted empty field, RFC 4180, 2.5)', () => {
    expect(quoted('').toString('latin1')).toBe('""');
  });

  it('writes 2-, 3- and 4-byte characters as UTF-8 (RFC 3629, section 7, examples)', () => {
    // "A<NOT IDENTICAL TO><ALPHA>." = 41 E2 89 A2 CE 91 2E
    expect(hex(quoted('A\u2262\u0391.'))).toBe(bytes(0x22, 0x41, 0xe2, 0x89, 0xa2, 0xce, 0x91, 0x2e, 0x22));
    // Korean "hangugeo" = ED 95 9C EA B5 AD EC 96 B4
    expect(hex(quoted('\ud55c\uad6d\uc5b4'))).toBe(
      bytes(0x22, 0xed, 0x95, 0x9c, 0xea, 0xb5, 0xad, 0xec, 0x96, 0xb4, 0x22),
    );
    // U+233B4 (a surrogate pair in UTF-16) = F0 A3 8E B4
    expect(hex(quoted('\u{233b4}'))).toBe(bytes(0x22, 0xf0, 0xa3, 0x8e, 0xb4, 0x22));
  });

  it('writes a lone surrogate as U+FFFD (EF BF BD), as TextEncoder and Buffer.from do', () => {
    // RFC 3629, section 3: U+D800–U+DFFF have no UTF-8 form. The WHATWG Encoding Standard's
    // TextEncoder takes a USVString, in which a lone surrogate is U+FFFD.
    const fffd = [0xef, 0xbf, 0xbd];
    expect(hex(quoted('\ud800'))).toBe(bytes(0x22, ...fffd, 0x22));
    expect(hex(quoted('a\udc00b'))).toBe(bytes(0x22, 0x61, ...fffd, 0x62, 0x22));
    // A high surrogate before a character that is not a low one: each written on its own.
    expect(hex(quoted('\ud83d"'))).toBe(bytes(0x22, ...fffd, 0x22, 0x22, 0x22));
    // Two low surrogates, then two high ones: four replacements, no pair formed backwards.
    expect(hex(quoted('\ude80\ude80\ud83d\ud83d'))).toBe(
      bytes(0x22, ...fffd, ...fffd, ...fffd, ...fffd, 0x22),
    );
    for (const s of ['\ud800', 'a\udc00b', '\ud83d"', '\ude80\ud83d', 'x\ud83d']) {
      expect(hex(quoted(s))).toBe(hex(Buffer.from(`"${s.replaceAll('"', '""')}"`)));
      expect(hex(quoted(s))).toBe(hex(Buffer.from(new TextEncoder().encode(`"${s.replaceAll('"', '""')}"`))));
    }
  });

  it('writes a long string (the native way) with the same bytes as a short one', () => {
    const piece = 'b"bb,\r\n A\u2262\u0391. \u{233b4} \ud800 ';
    const short = quoted(piece);
    expect(piece.length).toBeLessThan(256);
    const long = quoted(piece.repeat(20));
    expect(piece.repeat(20).length).toBeGreaterThan(256);
    const inner = short.subarray(1, short.length - 1);
    expect(hex(long)).toBe(
      hex(Buffer.concat([Buffer.from('"'), ...Array(20).fill(inner), Buffer.from('"')])),
    );
  });

  it('stays within quotedCsvBound for the widest strings', () => {
    for (const s of [
      '"'.repeat(300),
      '"'.repeat(100),
      '\u2262'.repeat(100),
      '\u2262'.repeat(300),
      '\ud800'.repeat(50),
    ]) {
      const field = quoted(s);
      expect(field.length).toBe(Buffer.byteLength(`"${s.replaceAll('"', '""')}"`));
    }
  });
});
