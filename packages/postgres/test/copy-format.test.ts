import { describe, expect, it } from 'vitest';
import { CopyChunks, copyLine, copyRow, csvField, encodeCopy, textField } from '../src/copy-format.js';
import { quoteIdentifier } from '../src/identifiers.js';
import { columnArrayLiteral, toWire } from '../src/values.js';

// Source: PostgreSQL documentation, COPY, "File Formats" (text format: backslash escapes, \N for
// NULL; CSV format: quoted values with doubled quotes, NULL as an unquoted empty field). The
// round trip through a real server is in test/integration/postgres-values.test.ts.
describe('COPY text format', () => {
  it('escapes backslash, newline, carriage return and tab', () => {
    expect(textField('a\tb')).toBe('a\\tb');
    expect(textField('line1\nline2\r\n')).toBe('line1\\nline2\\r\\n');
    expect(textField('C:\\path')).toBe('C:\\\\path');
  });

  it('writes NULL as \\N and keeps a literal "\\N" value apart from it', () => {
    expect(textField(null)).toBe('\\N');
    expect(textField('\\N')).toBe('\\\\N');
    expect(textField('')).toBe('');
  });

  it('cannot produce the end-of-data marker from a value', () => {
    expect(textField('\\.')).toBe('\\\\.');
  });

  it('leaves non-ASCII text as it is', () => {
    expect(textField('Zürich 🚲 東京')).toBe('Zürich 🚲 東京');
  });

  it('writes bytes as an escaped \\x hex string', () => {
    expect(textField(Buffer.from([0, 255]))).toBe('\\\\x00ff');
  });
});

describe('COPY CSV format', () => {
  it('quotes every value and doubles inner quotes', () => {
    expect(csvField('plain')).toBe('"plain"');
    expect(csvField('say "hi", then\nleave')).toBe('"say ""hi"", then\nleave"');
  });

  it('tells NULL (unquoted empty) from the empty string (quoted empty)', () => {
    expect(csvField(null)).toBe('');
    expect(csvField('')).toBe('""');
  });

  it('ends every row with a newline and reports the exact byte count', () => {
    const { chunks, bytes } = encodeCopy([[toWire('é'), toWire(null), toWire(3)]], 'csv');
    const all = Buffer.concat(chunks);
    expect(all.toString('utf8')).toBe('"é",,"3"\n');
    expect(bytes).toBe(all.length);
    expect(bytes).toBe(10); // é is two bytes in UTF-8
  });
});

describe('toWire', () => {
  it('sends NULL for null and undefined', () => {
    expect(toWire(null)).toBeNull();
    expect(toWire(undefined)).toBeNull();
  });

  it('renders dates in UTC, so the process time zone does not change what lands', () => {
    expect(toWire(new Date(Date.UTC(2024, 4, 1, 7, 30)))).toBe('2024-05-01T07:30:00.000Z');
  });

  it('renders arrays as PostgreSQL array literals with quoted, escaped elements', () => {
    // Source: PostgreSQL documentation, Arrays, "Array Value Input".
    expect(toWire(['a', 'b "c"', null, 'back\\slash'])).toBe('{"a","b \\"c\\"",NULL,"back\\\\slash"}');
    expect(
      toWire([
        [1, 2],
        [3, 4],
      ]),
    ).toBe('{{"1","2"},{"3","4"}}');
  });

  it('renders plain objects as JSON and bigints exactly', () => {
    expect(toWire({ dock: 'D-1', bikes: 4 })).toBe('{"dock":"D-1","bikes":4}');
    expect(toWire(2n ** 63n - 1n)).toBe('9223372036854775807');
  });
});

describe('quoteIdentifier', () => {
  // Source: PostgreSQL documentation, Lexical Structure, "Identifiers and Key Words" (a double
  // quote inside a quoted identifier is written twice).
  it('wraps a name in double quotes and doubles the quotes inside it', () => {
    expect(quoteIdentifier('dock_status')).toBe('"dock_status"');
    expect(quoteIdentifier('x"; DROP TABLE y; --')).toBe('"x""; DROP TABLE y; --"');
  });
});

describe('copyLine (the copy-mode hot path)', () => {
  const strings = ['tab\t', 'nl\n', 'cr\r', '\\N', '"q"', '', 'Zürich 🚲'];

  it.each(['csv', 'text'] as const)(
    'encodes strings and NULLs exactly as the general %s encoder does',
    (format) => {
      const values = [...strings, null];
      expect(copyLine(values, format)).toBe(copyRow(values.map(toWire), format));
    },
  );

  it('writes numbers bare, which both formats read as the number', () => {
    expect(copyLine([1, -2.5, 10n, null, 'x'], 'csv')).toBe('1,-2.5,10,,"x"\n');
    expect(copyLine([1, -2.5, 10n, null, 'x'], 'text')).toBe('1\t-2.5\t10\t\\N\tx\n');
  });
});

describe('CopyChunks (COPY rows written as bytes)', () => {
  const rows: unknown[][] = [
    ['tab\t', 'nl\n', 'cr\r', 'back\\slash', '\\N', '\\.', '"q"', '', 'Zürich 🚲 東京', null, undefined],
    [0, -0, 7, -42, 2147483647, -2147483647, 2147483648, 1.5, -2.5e-7, 1e21, Number.NaN, 10n, -(2n ** 70n)],
    [true, false, new Date(Date.UTC(2026, 11, 3, 6, 30)), Buffer.from([0, 255]), [1, 'a"b'], { dock: 'A1' }],
    // lone surrogates become U+FFFD, as Buffer.from(string) writes them
    ['\ud83d', 'x\ude80y', 'é'.repeat(300), `${'"'.repeat(100)}${'\t'.repeat(200)}`],
  ];

  const written = (format: 'csv' | 'text', input: unknown[][], rowsBeforeCut = Number.POSITIVE_INFINITY) => {
    const chunks: Buffer[] = [];
    const data = new CopyChunks((c) => chunks.push(Buffer.from(c)), format);
    input.forEach((r, i) => {
      data.row(r);
      if (i + 1 === rowsBeforeCut) data.finish();
    });
    data.finish();
    return { chunks, bytes: data.bytes };
  };

  it.each(['csv', 'text'] as const)('writes each row as the UTF-8 bytes of its %s line', (format) => {
    const { chunks, bytes } = written(format, rows);
    const expected = Buffer.from(rows.map((r) => copyLine(r, format)).join(''), 'utf8');
    expect(Buffer.concat(chunks).equals(expected)).toBe(true);
    expect(bytes).toBe(expected.length);
  });

  it('ends every chunk at the end of a row when the rows fill many chunks', () => {
    const many = Array.from({ length: 5000 }, (_, i) => [i, `dock-${i} "north" ✓`, 'x'.repeat(i % 400)]);
    const { chunks } = written('csv', many);
    expect(chunks.length).toBeGreaterThan(5);
    for (const c of chunks) expect(c[c.length - 1]).toBe(0x0a);
    const expected = Buffer.from(many.map((r) => copyLine(r, 'csv')).join(''), 'utf8');
    expect(Buffer.concat(chunks).equals(expected)).toBe(true);
  });

  it('leaves nothing of a row whose value cannot be written, and writes the rows around it', () => {
    const chunks: Buffer[] = [];
    const data = new CopyChunks((c) => chunks.push(Buffer.from(c)), 'text');
    data.row([1, 'a']);
    expect(() => data.row([2, 'b', () => 0])).toThrow(TypeError);
    data.row([3, 'c']);
    data.finish();
    expect(Buffer.concat(chunks).toString('utf8')).toBe('1\ta\n3\tc\n');
  });
});

describe('columnArrayLiteral (the unnest insert form)', () => {
  // Source: PostgreSQL documentation, Arrays, "Array Value Input": double quotes and backslashes
  // inside a quoted element are backslash-escaped; an unquoted NULL is a null element.
  it('picks one column out of row-major values, quoting and escaping each element', () => {
    const flat = ['a', '1', 'b "c"', null, 'NULL', '\\x', '', Buffer.from([255])].map((v) =>
      typeof v === 'string' || v === null ? v : v,
    );
    expect(columnArrayLiteral(flat as never, 0, 2)).toBe('{"a","b \\"c\\"","NULL",""}');
    expect(columnArrayLiteral(flat as never, 1, 2)).toBe('{"1",NULL,"\\\\x","\\\\xff"}');
  });
});

describe('COPY chunks', () => {
  it('keeps lines given as bytes and as rows of values in order, each ended by a newline', () => {
    const chunks: Buffer[] = [];
    const data = new CopyChunks((c) => chunks.push(c));
    data.row(['a', 1]);
    data.pushBytes(Buffer.from('b,2'));
    data.pushBytes(Buffer.from('"c, ""q""",3'));
    data.row(['d', null]);
    data.finish();
    const all = Buffer.concat(chunks);
    expect(all.toString()).toBe(
      `${copyLine(['a', 1], 'csv')}b,2\n"c, ""q""",3\n${copyLine(['d', null], 'csv')}`,
    );
    expect(data.bytes).toBe(all.length);
  });

  it('cuts a long run of byte lines into chunks of about 64 KiB', () => {
    const chunks: Buffer[] = [];
    const data = new CopyChunks((c) => chunks.push(c));
    const line = Buffer.from('x'.repeat(99));
    for (let i = 0; i < 2000; i++) data.pushBytes(line);
    data.finish();
    expect(Buffer.concat(chunks).length).toBe(200_000);
    expect(chunks.length).toBe(4);
    expect(Math.max(...chunks.map((c) => c.length))).toBeLessThanOrEqual(65_536 + 100);
  });
});
