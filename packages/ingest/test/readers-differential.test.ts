// A seeded random differential test: the streaming CSV and NDJSON readers, fed random documents
// in random chunk sizes (1-byte chunks included), must give exactly what a small whole-input
// reference reader written here gives. The reference follows the documented reading rules
// (packages/ingest/README.md, "Reading rules") in the plainest way: the whole input at once, a
// field at a time, no state carried between chunks.
import { isUtf8 } from 'node:buffer';
import { describe, expect, it } from 'vitest';
// The engine's seeded generator (mulberry32): the same sequences as the copy this file had.
import { seeded as random } from '../../core/test/fakes.js';
import { CsvFramer } from '../src/csv-framer.js';
import { csvReader, type Item, ndjsonReader } from '../src/rows.js';

const LF = 0x0a;
const CR = 0x0d;
const QUOTE = 0x22;
const BOM = Buffer.from([0xef, 0xbb, 0xbf]);

/** What a reader gave, in a form both sides can produce. */
type Out =
  | { line: number; fields: string[] }
  | { line: number; value: unknown }
  | { line: number; reason: string; raw: string; truncated: boolean };

interface Result {
  items: Out[];
  blank: number;
}

function rejectOut(line: number, reason: string, raw: Buffer, truncated: boolean): Out {
  return { line, reason, raw: raw.toString('hex'), truncated };
}

// ---- reference readers ------------------------------------------------------------------------

function referenceCsv(input: Buffer, delim: number, max: number): Result {
  const items: Out[] = [];
  let blank = 0;
  let p = input[0] === 0xef && input[1] === 0xbb && input[2] === 0xbf ? 3 : 0;
  let line = 1;
  const n = input.length;
  while (p < n) {
    const start = p;
    const fields: Buffer[] = [];
    let errorAt = -1;
    let unclosed = false;
    let end = n;
    let q = p;
    for (;;) {
      if (input[q] === QUOTE) {
        const value: number[] = [];
        let k = q + 1;
        for (;;) {
          if (k >= n) break;
          if (input[k] === QUOTE) {
            if (input[k + 1] === QUOTE) {
              value.push(QUOTE);
              k += 2;
              continue;
            }
            break;
          }
          value.push(input[k]!);
          k++;
        }
        if (k >= n) {
          unclosed = true;
          break;
        }
        k++; // past the closing quote
        fields.push(Buffer.from(value));
        if (k >= n) break;
        const c = input[k];
        if (c === delim) {
          q = k + 1;
          continue;
        }
        if (c === LF) {
          end = k;
          break;
        }
        if (c === CR && (k + 1 >= n || input[k + 1] === LF)) {
          end = k + 1;
          break;
        }
        errorAt = k;
        break;
      }
      let k = q;
      while (k < n && input[k] !== delim && input[k] !== LF && input[k] !== QUOTE) k++;
      if (k < n && input[k] === QUOTE) {
        errorAt = k;
        break;
      }
      fields.push(input.subarray(q, k));
      if (k < n && input[k] === delim) {
        q = k + 1;
        continue;
      }
      end = k;
      break;
    }
    if (errorAt >= 0) {
      const lf = input.indexOf(LF, errorAt);
      end = lf < 0 ? n : lf;
    }
    const next = unclosed ? n : end < n ? end + 1 : n;
    let bytes = input.subarray(start, unclosed ? n : end);
    const startLine = line;
    for (let i = start; i < next; i++) if (input[i] === LF) line++;
    p = next;
    if (!unclosed && bytes[bytes.length - 1] === CR) bytes = bytes.subarray(0, -1);
    const long = bytes.length > max;
    if (unclosed || errorAt >= 0) {
      items.push(rejectOut(startLine, 'csv-syntax', long ? bytes.subarray(0, max) : bytes, long));
    } else if (bytes.length === 0) blank++;
    else if (long) items.push(rejectOut(startLine, 'too-long', bytes.subarray(0, max), true));
    else if (!isUtf8(bytes)) items.push(rejectOut(startLine, 'utf8', bytes, false));
    else {
      // The CR of a CRLF ends the last (unquoted) field, not its text.
      const last = fields[fields.length - 1];
      if (last && last[last.length - 1] === CR && input[end - 1] === CR && input[end - 2] !== QUOTE)
        fields[fields.length - 1] = last.subarray(0, -1);
      items.push({ line: startLine, fields: fields.map((f) => f.toString('utf8')) });
    }
  }
  return { items, blank };
}

function referenceNdjson(input: Buffer, max: number): Result {
  const items: Out[] = [];
  let blank = 0;
  const body = input.subarray(0, 3).equals(BOM) ? input.subarray(3) : input;
  const lines: Buffer[] = [];
  for (let p = 0; p < body.length; ) {
    const lf = body.indexOf(LF, p);
    lines.push(body.subarray(p, lf < 0 ? body.length : lf));
    p = lf < 0 ? body.length : lf + 1;
  }
  for (let i = 0; i < lines.length; i++) {
    const raw = lines[i]!;
    const line = i + 1;
    const bytes = raw[raw.length - 1] === CR ? raw.subarray(0, -1) : raw;
    if (bytes.length > max) {
      items.push(rejectOut(line, 'too-long', bytes.subarray(0, max), true));
      continue;
    }
    if (!isUtf8(bytes)) {
      items.push(rejectOut(line, 'utf8', bytes, false));
      continue;
    }
    const text = bytes.toString('utf8'); // a BOM inside stays: Buffer decoding keeps U+FEFF
    if (/^[ \t\r]*$/.test(text)) {
      blank++;
      continue;
    }
    try {
      items.push({ line, value: JSON.parse(text) });
    } catch {
      items.push(rejectOut(line, 'json', bytes, false));
    }
  }
  return { items, blank };
}

// ---- the readers under test, in chunks ----------------------------------------------------------

function streamed(reader: ReturnType<typeof csvReader>, input: Buffer, rnd: () => number): Result {
  const all: Item[] = [];
  for (let i = 0; i < input.length; ) {
    const size = rnd() < 0.3 ? 1 : 1 + Math.floor(rnd() * 40);
    all.push(...reader.push(input.subarray(i, i + size)));
    i += size;
  }
  all.push(...reader.end());
  const items: Out[] = [];
  for (const it of all) {
    if (it.kind === 'fields') items.push({ line: it.line, fields: it.fields });
    else if (it.kind === 'value') items.push({ line: it.line, value: it.value });
    else if (it.kind === 'reject') {
      items.push(rejectOut(it.line, it.reason, Buffer.from(it.raw), it.truncated));
    }
  }
  return { items, blank: reader.blankLines };
}

/**
 * A reader's items with each run (`csvReader` with `runs`) framed again into its records, and
 * lines as their bytes: what a run stands for, in a form both readers produce.
 */
function asLines(withRuns: boolean, input: Buffer, rnd: () => number, delim: number, max: number) {
  const reader = csvReader(delim, max, true);
  const all: Item[] = [];
  for (let i = 0; i < input.length; ) {
    const size = rnd() < 0.1 ? 1 : 1 + Math.floor(rnd() * 300);
    const got = reader.push(input.subarray(i, i + size));
    // Runs of the header's width once the header is read, as the ingest asks for them.
    const header = got.find((it) => it.kind === 'fields');
    if (withRuns && header?.kind === 'fields' && all.every((it) => it.kind !== 'fields'))
      reader.frameRuns!(header.fields.length);
    all.push(...got);
    i += size;
  }
  all.push(...reader.end());
  const items: Array<Out | { line: number; bytes: string }> = [];
  let runs = 0;
  for (const it of all) {
    if (it.kind === 'fields') items.push({ line: it.line, fields: it.fields });
    else if (it.kind === 'line') items.push({ line: it.line, bytes: it.raw.toString('hex') });
    else if (it.kind === 'run') {
      runs++;
      const framer = new CsvFramer(delim, max, it.line, false);
      const frames = [...framer.push(it.raw), ...framer.end()];
      expect(frames).toHaveLength(it.count);
      for (const f of frames) items.push({ line: f.line, bytes: f.bytes.toString('hex') });
    } else if (it.kind === 'reject')
      items.push(rejectOut(it.line, it.reason, Buffer.from(it.raw), it.truncated));
  }
  return { items, blank: reader.blankLines, lastLine: reader.lastLine, runs };
}

// ---- random documents ---------------------------------------------------------------------------

/** A header of `width` fields, then records of mostly that width, mostly plain. */
function runDocument(rnd: () => number, delim: string): Buffer {
  const parts: Buffer[] = [];
  const text = (s: string) => parts.push(Buffer.from(s, 'utf8'));
  if (rnd() < 0.1) parts.push(BOM);
  const width = 1 + Math.floor(rnd() * 4);
  const eol = () => (rnd() < 0.5 ? '\r\n' : pick(rnd, ['\n', '\r\n']));
  text(`${Array.from({ length: width }, (_, i) => `c${i}`).join(delim)}${eol()}`);
  const records = Math.floor(rnd() * 60);
  for (let r = 0; r < records; r++) {
    if (rnd() < 0.03) {
      text(eol());
      continue;
    }
    const fields = rnd() < 0.9 ? width : 1 + Math.floor(rnd() * 4);
    for (let f = 0; f < fields; f++) {
      if (f > 0) text(delim);
      const kind = rnd();
      if (kind < 0.7) text(pick(rnd, ['a', 'bc', 'é', '😀', ' x ', '0', 'xxxxxxxxxx', '\\.']));
      else if (kind < 0.9) {
        text('"');
        for (let k = Math.floor(rnd() * 3); k > 0; k--)
          text(pick(rnd, ['a', '""', delim, '\n', '\r\n', '\r']));
        text('"');
      } else if (kind < 0.94)
        text(''); // an empty field
      else if (kind < 0.96) parts.push(Buffer.from([0xff]));
      else if (kind < 0.98) text('\r');
      else text(pick(rnd, ['a"b', '"a"b', '"a"\rb']));
    }
    if (!(r === records - 1 && rnd() < 0.3)) text(eol());
  }
  return Buffer.concat(parts);
}

function pick<T>(rnd: () => number, xs: readonly T[]): T {
  return xs[Math.floor(rnd() * xs.length)]!;
}

const TEXT = ['a', 'bc', 'é', '😀', ' ', 'xxxxxxxxxx', '\r', '0', '__proto__'];

function csvDocument(rnd: () => number, delim: string): Buffer {
  const parts: Buffer[] = [];
  const text = (s: string) => parts.push(Buffer.from(s, 'utf8'));
  if (rnd() < 0.2) parts.push(BOM);
  const records = Math.floor(rnd() * 10);
  for (let r = 0; r < records; r++) {
    if (rnd() < 0.08) {
      text(pick(rnd, ['\n', '\r\n']));
      continue;
    }
    const fields = 1 + Math.floor(rnd() * 4);
    for (let f = 0; f < fields; f++) {
      if (f > 0) text(delim);
      const kind = rnd();
      if (kind < 0.45) {
        for (let k = Math.floor(rnd() * 3); k > 0; k--) text(pick(rnd, TEXT));
      } else if (kind < 0.85) {
        text('"');
        for (let k = Math.floor(rnd() * 4); k > 0; k--)
          text(pick(rnd, [...TEXT, '""', delim, '\n', '\r\n', 'yyyyyyyyyyyyyyyyyyyy']));
        text('"');
      } else if (kind < 0.9) parts.push(Buffer.from([0xff]));
      else if (kind < 0.93)
        parts.push(Buffer.from([0xc3])); // a lone lead byte
      else if (kind < 0.95) parts.push(BOM);
      else text(pick(rnd, ['a"b', '"a"b', '"a"\rb', '"a" ']));
    }
    const last = r === records - 1;
    if (last && rnd() < 0.1) text(`"unclosed${pick(rnd, ['', '\n1,2\n', '\r', '\r\n'])}`);
    else if (!(last && rnd() < 0.3)) text(pick(rnd, ['\n', '\r\n']));
  }
  return Buffer.concat(parts);
}

function ndjsonDocument(rnd: () => number): Buffer {
  const parts: Buffer[] = [];
  const text = (s: string) => parts.push(Buffer.from(s, 'utf8'));
  if (rnd() < 0.2) parts.push(BOM);
  const lines = Math.floor(rnd() * 8);
  for (let l = 0; l < lines; l++) {
    const kind = rnd();
    if (kind < 0.6) {
      const key = pick(rnd, ['a', '__proto__', 'constructor', 'é']);
      text(JSON.stringify({ [key]: pick(rnd, TEXT), n: Math.floor(rnd() * 1000) }));
    } else if (kind < 0.68) text(pick(rnd, ['', ' ', '\t']));
    else if (kind < 0.74) text(pick(rnd, ['[1]', '"s"', 'null', '3']));
    else if (kind < 0.8) text(pick(rnd, ['{"a":', '{x}', 'nope']));
    else if (kind < 0.86) parts.push(Buffer.from('{"a":"'), Buffer.from([0xff]), Buffer.from('"}'));
    else if (kind < 0.9) parts.push(BOM, Buffer.from('{"a":1}'));
    else text(`{"long":"${'z'.repeat(Math.floor(rnd() * 60))}"}`);
    if (!(l === lines - 1 && rnd() < 0.3)) text(pick(rnd, ['\n', '\r\n']));
  }
  return Buffer.concat(parts);
}

describe('the streaming readers against a whole-input reference reader (seeded, random chunks)', () => {
  it('gives the same fields, rejects (line, reason, raw bytes, truncated) and blank lines for 3,000 CSV documents', () => {
    const rnd = random(20261203);
    for (let d = 0; d < 3000; d++) {
      const delim = pick(rnd, [',', ';', '\t']);
      const max = pick(rnd, [4, 8, 16, 32, 1 << 20]);
      const input = csvDocument(rnd, delim);
      const expected = referenceCsv(input, delim.charCodeAt(0), max);
      const actual = streamed(csvReader(delim.charCodeAt(0), max), input, rnd);
      expect(
        actual,
        `document ${d} (${input.toString('hex')}), delimiter ${JSON.stringify(delim)}, max ${max}`,
      ).toEqual(expected);
    }
  });

  it('gives, with runs of plain records, the same records, lines, rejects and blank lines as without', () => {
    const rnd = random(4180_17);
    let runs = 0;
    for (let d = 0; d < 2000; d++) {
      const delim = pick(rnd, [',', ';']);
      const max = pick(rnd, [8, 24, 1 << 20]);
      const input = runDocument(rnd, delim);
      const code = delim.charCodeAt(0);
      const expected = asLines(false, input, rnd, code, max);
      const actual = asLines(true, input, rnd, code, max);
      runs += actual.runs;
      expect(
        { ...actual, runs: undefined },
        `document ${d} (${input.toString('hex')}), delimiter ${JSON.stringify(delim)}, max ${max}`,
      ).toEqual({ ...expected, runs: undefined });
    }
    // Runs did form (the comparison is not between two readers that frame record by record).
    expect(runs).toBeGreaterThan(1000);
  });

  it('gives the same values, rejects and blank lines for 2,000 NDJSON documents', () => {
    const rnd = random(4180);
    for (let d = 0; d < 2000; d++) {
      const max = pick(rnd, [6, 12, 24, 1 << 20]);
      const input = ndjsonDocument(rnd);
      const expected = referenceNdjson(input, max);
      const actual = streamed(ndjsonReader(max), input, rnd);
      expect(actual, `document ${d} (${input.toString('hex')}), max ${max}`).toEqual(expected);
    }
  });
});
