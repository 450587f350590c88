import { Readable } from 'node:stream';
import { Sink } from '@spillway/core';
import { describe, expect, it } from 'vitest';
import { type IngestOptions, ingest, type Reject, type Row } from '../src/index.js';
import { MemoryAdapter } from './memory-adapter.js';

async function run(text: string | Buffer, options: IngestOptions<Row> = {}) {
  const adapter = new MemoryAdapter<Row>();
  const sink = new Sink(adapter);
  const rejects: Reject[] = [];
  const bytes = Buffer.isBuffer(text) ? text : Buffer.from(text, 'utf8');
  const chunks: Buffer[] = [];
  for (let i = 0; i < bytes.length; i += 5) chunks.push(bytes.subarray(i, i + 5));
  const summary = await ingest(Readable.from(chunks), sink, {
    format: 'ndjson',
    rejects: { write: (r) => void rejects.push(r) },
    ...options,
  });
  await sink.close();
  return { rows: adapter.stored, lines: adapter.lines, rejects, summary };
}

describe('NDJSON as jsonlines.org describes it', () => {
  // Source: jsonlines.org: UTF-8, one JSON value per line, line separator '\n' ('\r\n' also
  // supported "because surrounding white space is implicitly ignored"), the last separator optional.
  it('reads one JSON object per line, LF or CRLF', async () => {
    const { rows, lines } = await run('{"dock":"DK-1","bikes":4}\r\n{"dock":"DK-2","bikes":0}\n');
    expect(rows).toEqual([
      { dock: 'DK-1', bikes: 4 },
      { dock: 'DK-2', bikes: 0 },
    ]);
    expect(lines).toEqual([1, 2]);
  });

  it('reads a trailing line without a newline as the last row', async () => {
    const { rows, summary } = await run('{"a":1}\n{"a":2}');
    expect(rows).toEqual([{ a: 1 }, { a: 2 }]);
    expect(summary).toMatchObject({ rowsRead: 2, rowsWritten: 2, lastLine: 2 });
  });

  it('skips blank lines and counts them, keeping line numbers (documented default)', async () => {
    const { rows, lines, summary } = await run('{"a":1}\n\n   \n{"a":2}\n\n');
    expect(rows).toEqual([{ a: 1 }, { a: 2 }]);
    expect(lines).toEqual([1, 4]);
    expect(summary).toMatchObject({ blankLines: 3, rowsRejected: 0 });
  });

  it('rejects blank lines when asked to', async () => {
    const { rejects, summary } = await run('{"a":1}\n\n{"a":2}\n', { blankLines: 'reject' });
    expect(rejects.map((r) => [r.line, r.reason])).toEqual([[2, 'blank']]);
    expect(summary).toMatchObject({ rowsRead: 3, rowsWritten: 2, rowsRejected: 1 });
  });

  it('rejects a malformed line with its line number and writes the lines after it', async () => {
    // Source: RFC 8259 §4: a trailing comma is not allowed in an object.
    const { rows, rejects } = await run('{"a":1}\n{"a":2,}\n{"a":3}\n');
    expect(rows).toEqual([{ a: 1 }, { a: 3 }]);
    expect(rejects).toHaveLength(1);
    expect(rejects[0]).toMatchObject({ line: 2, reason: 'json' });
    expect(rejects[0]!.message).not.toContain('"a"');
    expect(Buffer.from(rejects[0]!.raw).toString()).toBe('{"a":2,}');
  });

  it('rejects JSON values that are not objects', async () => {
    const { rejects } = await run('[1,2]\n3\n"x"\nnull\n{"ok":true}\n');
    expect(rejects.map((r) => [r.line, r.reason])).toEqual([
      [1, 'not-object'],
      [2, 'not-object'],
      [3, 'not-object'],
      [4, 'not-object'],
    ]);
  });

  it('rejects invalid UTF-8 on its own line only', async () => {
    const bytes = Buffer.concat([
      Buffer.from('{"a":"é"}\n{"a":"'),
      Buffer.from([0xc3, 0x28]),
      Buffer.from('"}\n{"a":"z"}\n'),
    ]);
    const { rows, rejects } = await run(bytes);
    expect(rows).toEqual([{ a: 'é' }, { a: 'z' }]);
    expect(rejects).toMatchObject([{ line: 2, reason: 'utf8' }]);
  });

  it('rejects a line longer than maxRowBytes, keeping only its first bytes, and reads on', async () => {
    const long = `{"a":"${'x'.repeat(500)}"}`;
    const { rows, rejects } = await run(`{"a":1}\n${long}\n{"a":2}\n`, { maxRowBytes: 64 });
    expect(rows).toEqual([{ a: 1 }, { a: 2 }]);
    expect(rejects).toMatchObject([{ line: 2, reason: 'too-long', truncated: true }]);
    expect(rejects[0]!.raw.length).toBe(64);
  });

  it('accepts a line of exactly maxRowBytes ending in CRLF', async () => {
    const line = '{"a":"xxxx"}'; // 12 bytes
    const { rows, rejects } = await run(`${line}\r\n`, { maxRowBytes: 12 });
    expect(rejects).toEqual([]);
    expect(rows).toEqual([{ a: 'xxxx' }]);
  });
});
