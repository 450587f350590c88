// Regression tests for the readers' recovery and framing rules: over-long and unclosed quoted
// records, the CR of CRLF against maxRowBytes, column names that are Object.prototype's, and byte
// order marks however the stream is cut.
import { Readable } from 'node:stream';
import { Sink } from '@spillway/core';
import { describe, expect, it } from 'vitest';
import { type IngestOptions, ingest, type Reject, type Row } from '../src/index.js';
import { MemoryAdapter } from './memory-adapter.js';

/** Runs an ingest over `text` cut at the given chunk sizes (repeated), or in one chunk. */
async function run(text: string | Buffer, options: IngestOptions<Row>, cuts: number[] = []) {
  const adapter = new MemoryAdapter<Row>();
  const sink = new Sink(adapter);
  const rejects: Reject[] = [];
  const bytes = Buffer.isBuffer(text) ? text : Buffer.from(text, 'utf8');
  const chunks: Buffer[] = [];
  for (let i = 0, k = 0; i < bytes.length; k++) {
    const size = cuts.length === 0 ? bytes.length : cuts[k % cuts.length]!;
    chunks.push(bytes.subarray(i, i + size));
    i += size;
  }
  const summary = await ingest(Readable.from(chunks), sink, {
    rejects: { write: (r) => void rejects.push(r) },
    ...options,
  });
  await sink.close();
  return { rows: adapter.stored, lines: adapter.lines, rejects, summary };
}

const short = (r: Reject) => [r.line, r.reason, r.truncated];

describe('an over-long or unclosed quoted CSV record', () => {
  it('never lands the inner lines of an over-long quoted record as rows', async () => {
    // The repro of the defect: a quoted field longer than the limit whose inner lines look like rows.
    const text = `id,name\n1,a\n2,"${'y'.repeat(200)}\n99,injected\n${'z'.repeat(20)}"\n3,c\n`;
    const { rows, lines, rejects, summary } = await run(text, {
      format: 'csv',
      columns: [{ name: 'id', type: 'integer', required: true }, { name: 'name' }],
      maxRowBytes: 64,
    });
    expect(rows.map((r) => r.id)).toEqual([1, 3]);
    expect(lines).toEqual([2, 6]);
    expect(rejects.map(short)).toEqual([[3, 'too-long', true]]);
    expect(rejects[0]!.column).toBe('name');
    expect(Buffer.from(rejects[0]!.raw).toString()).toBe(`2,"${'y'.repeat(61)}`);
    expect(summary).toMatchObject({ rowsRead: 3, rowsWritten: 2, rowsRejected: 1, lastLine: 6 });
  });

  it('lands the same rows after a closed over-long quote whatever maxRowBytes is, in any chunking', async () => {
    const valid = Array.from({ length: 300 }, (_, i) => `${i + 10},ok\n`).join('');
    const text = `id,name\n1,a\n2,"${'q\n'.repeat(100)}"\n${valid}`;
    for (const maxRowBytes of [8, 64, 150, 203, 204, 1 << 20]) {
      for (const cuts of [[], [1], [7, 3, 64]]) {
        const { rows, rejects, summary } = await run(text, { format: 'csv', maxRowBytes }, cuts);
        // The quoted record is `2,"` + 200 bytes + `"` = 204 bytes: it lands only when it fits.
        const fits = maxRowBytes >= 204;
        const after = Array.from({ length: 300 }, (_, i) => String(i + 10));
        expect(rows.map((r) => r.id)).toEqual(fits ? ['1', '2', ...after] : ['1', ...after]);
        expect(rejects.map(short)).toEqual(fits ? [] : [[3, 'too-long', true]]);
        expect(summary).toMatchObject({ rowsRead: 302, lastLine: 403 });
      }
    }
  });

  it('rejects everything from an unclosed quote to the end of the input as one csv-syntax row, whatever maxRowBytes is', async () => {
    const valid = Array.from({ length: 3439 }, (_, i) => `${i + 10},ok\n`).join('');
    const text = `id,name\n1,a\n2,"never closed\n${valid}`;
    for (const maxRowBytes of [16, 4096, 1 << 20]) {
      const { rows, rejects, summary } = await run(text, { format: 'csv', maxRowBytes }, [4096]);
      expect(rows).toEqual([{ id: '1', name: 'a' }]);
      expect(rejects.map(short)).toEqual([[3, 'csv-syntax', maxRowBytes < text.length]]);
      expect(rejects[0]!.message).toMatch(/not closed at the end of the input/);
      expect(rejects[0]!.raw.length).toBe(Math.min(maxRowBytes, text.length - 'id,name\n1,a\n'.length));
      expect(summary).toMatchObject({ rowsRead: 2, rowsWritten: 1, rowsRejected: 1 });
    }
  });

  it("keeps a trailing CR inside an unclosed quote in the reject's raw", async () => {
    const { rejects } = await run('a,b\n1,"open\r', { format: 'csv' }, [1]);
    expect(rejects.map(short)).toEqual([[2, 'csv-syntax', false]]);
    expect(Buffer.from(rejects[0]!.raw).toString()).toBe('1,"open\r');
  });
});

describe('the line break does not count towards maxRowBytes', () => {
  it('lands a CSV record of exactly maxRowBytes ending in CRLF, as it lands with LF', async () => {
    for (const eol of ['\n', '\r\n']) {
      const { rows, rejects } = await run(`a,b${eol}abc,d${eol}`, { format: 'csv', maxRowBytes: 5 }, [1]);
      expect(rejects).toEqual([]);
      expect(rows).toEqual([{ a: 'abc', b: 'd' }]);
    }
  });

  it('lands a CSV record of exactly maxRowBytes ending in a CR at the end of the input', async () => {
    const { rows, rejects } = await run('a,b\r\nabc,d\r', { format: 'csv', maxRowBytes: 5 }, [2]);
    expect(rejects).toEqual([]);
    expect(rows).toEqual([{ a: 'abc', b: 'd' }]);
  });

  it('lands a CSV record of exactly maxRowBytes whose closing quote is followed by CRLF or a final CR', async () => {
    for (const tail of ['\r\n', '\r']) {
      const { rows, rejects } = await run(`a,b\r\nab,"d"${tail}`, { format: 'csv', maxRowBytes: 6 }, [3]);
      expect(rejects).toEqual([]);
      expect(rows).toEqual([{ a: 'ab', b: 'd' }]);
    }
  });

  it('still rejects a CSV record one byte over maxRowBytes, CRLF or not', async () => {
    const { rejects } = await run('a,b\r\nabcd,e\r\nx,y\r\n', { format: 'csv', maxRowBytes: 5 }, [1]);
    expect(rejects.map(short)).toEqual([[2, 'too-long', true]]);
    expect(Buffer.from(rejects[0]!.raw).toString()).toBe('abcd,');
  });
});

describe("column names that are Object.prototype's own", () => {
  const names = ['__proto__', 'constructor', 'prototype'];

  it('keeps every CSV header column as an own property of the row', async () => {
    for (const name of names) {
      const { rows, rejects } = await run(`id,${name}\n1,x\n`, { format: 'csv' }, [1]);
      expect(rejects).toEqual([]);
      expect(Object.hasOwn(rows[0]!, name)).toBe(true);
      expect(Object.getOwnPropertyDescriptor(rows[0]!, name)?.value).toBe('x');
      expect(Object.getPrototypeOf(rows[0]!)).toBe(Object.prototype);
      expect(Object.keys(rows[0]!)).toEqual(['id', name]);
    }
  });

  it('keeps every declared column as an own property, read by header name and by position', async () => {
    for (const name of names) {
      const columns = [
        { name: 'id', type: 'integer' as const },
        { name, required: true },
      ];
      for (const [text, header] of [
        [`id,${name}\n1,x\n`, true],
        ['1,x\n', false],
      ] as const) {
        const { rows, rejects } = await run(text, { format: 'csv', columns, header });
        expect(rejects).toEqual([]);
        expect(Object.getOwnPropertyDescriptor(rows[0]!, name)?.value).toBe('x');
        expect(Object.getPrototypeOf(rows[0]!)).toBe(Object.prototype);
      }
    }
  });

  it('keeps every NDJSON property as an own property, with and without declared columns', async () => {
    for (const name of names) {
      const line = `{"id":1,"${name}":"x"}\n`;
      const plain = await run(line, { format: 'ndjson' });
      expect(Object.getOwnPropertyDescriptor(plain.rows[0]!, name)?.value).toBe('x');
      const declared = await run(line, {
        format: 'ndjson',
        columns: [{ name: 'id', type: 'integer' }, { name }],
      });
      expect(Object.getOwnPropertyDescriptor(declared.rows[0]!, name)?.value).toBe('x');
      expect(Object.getPrototypeOf(declared.rows[0]!)).toBe(Object.prototype);
    }
  });

  it("reads an NDJSON object without such a property as missing, not as Object.prototype's value", async () => {
    for (const name of names) {
      const { rows, rejects } = await run('{"id":1}\n', {
        format: 'ndjson',
        columns: [{ name: 'id', type: 'integer' }, { name }],
      });
      expect(rejects).toEqual([]);
      expect(Object.getOwnPropertyDescriptor(rows[0]!, name)?.value).toBe(null);
      const required = await run('{"id":1}\n', {
        format: 'ndjson',
        columns: [
          { name: 'id', type: 'integer' },
          { name, required: true },
        ],
      });
      expect(required.rejects.map((r) => [r.reason, r.column])).toEqual([['required', name]]);
    }
  });
});

describe('byte order marks', () => {
  const BOM = '\ufeff';

  it('skips a leading NDJSON byte order mark however the stream is cut', async () => {
    const text = `${BOM}{"a":"xxxx"}\n`; // the object is 12 bytes
    for (const cuts of [[], [1], [2], [1, 15], [2, 1], [3]]) {
      const { rows, rejects } = await run(text, { format: 'ndjson', maxRowBytes: 12 }, cuts);
      expect(rejects).toEqual([]);
      expect(rows).toEqual([{ a: 'xxxx' }]);
    }
  });

  it("leaves the leading byte order mark out of an NDJSON reject's raw", async () => {
    for (const [body, reason] of [
      ['{"a":', 'json'],
      ['[1]', 'not-object'],
      ['"\xff"', 'utf8'],
      [`{"a":"${'x'.repeat(40)}"}`, 'too-long'],
    ] as const) {
      const bytes = Buffer.concat([
        Buffer.from([0xef, 0xbb, 0xbf]),
        Buffer.from(body, 'latin1'),
        Buffer.from('\n'),
      ]);
      for (const cuts of [[], [1], [2, 5]]) {
        const { rejects } = await run(bytes, { format: 'ndjson', maxRowBytes: 20 }, cuts);
        expect(rejects.map((r) => r.reason)).toEqual([reason]);
        expect(Buffer.from(rejects[0]!.raw)).toEqual(Buffer.from(body, 'latin1').subarray(0, 20));
      }
    }
  });

  it('reads an input of only a byte order mark as empty, with no blank line, in both formats', async () => {
    for (const format of ['csv', 'ndjson'] as const) {
      for (const cuts of [[], [1], [2]]) {
        const { rows, rejects, summary } = await run(BOM, { format, blankLines: 'reject' }, cuts);
        expect(rows).toEqual([]);
        expect(rejects).toEqual([]);
        expect(summary).toMatchObject({ rowsRead: 0, blankLines: 0 });
      }
    }
  });

  it('treats a byte order mark after the start of the input as data, in both formats', async () => {
    // CSV: the BOM is part of the field's text.
    const csv = await run(`a,b\n${BOM}1,2\n`, { format: 'csv' }, [1]);
    expect(csv.rows).toEqual([{ a: `${BOM}1`, b: '2' }]);
    // NDJSON: a line starting with a BOM is not JSON (RFC 8259 §8.1 lets a parser ignore a BOM
    // only at the start of a JSON text, here the input).
    const ndjson = await run(`{"a":1}\n${BOM}{"a":2}\n`, { format: 'ndjson' }, [1]);
    expect(ndjson.rows).toEqual([{ a: 1 }]);
    expect(ndjson.rejects.map((r) => [r.line, r.reason])).toEqual([[2, 'json']]);
  });
});
