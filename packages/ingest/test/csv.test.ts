import { Readable } from 'node:stream';
import { Sink } from '@spillway/core';
import { describe, expect, it } from 'vitest';
import { ingest, type Reject, type Row } from '../src/index.js';
import { MemoryAdapter } from './memory-adapter.js';

async function run(text: string | Buffer, options: Parameters<typeof ingest<Row>>[2] = {}, chunkSize = 7) {
  const adapter = new MemoryAdapter<Row>();
  const sink = new Sink(adapter);
  const rejects: Reject[] = [];
  const bytes = Buffer.isBuffer(text) ? text : Buffer.from(text, 'utf8');
  // Small chunks so records, quotes and CRLFs straddle chunk boundaries.
  const chunks: Buffer[] = [];
  for (let i = 0; i < bytes.length; i += chunkSize) chunks.push(bytes.subarray(i, i + chunkSize));
  const summary = await ingest(Readable.from(chunks), sink, {
    format: 'csv',
    rejects: { write: (r) => void rejects.push(r) },
    ...options,
  });
  await sink.close();
  return { rows: adapter.stored, lines: adapter.lines, rejects, summary };
}

describe('CSV as RFC 4180 describes it', () => {
  // Source: RFC 4180, section 2, rules 1–7 and their examples.
  it('reads records separated by CRLF, the last one with or without a line break (§2.1, §2.2)', async () => {
    const a = await run('name,dock\r\naaa,bbb\r\nzzz,yyy\r\n');
    const b = await run('name,dock\r\naaa,bbb\r\nzzz,yyy');
    expect(a.rows).toEqual([
      { name: 'aaa', dock: 'bbb' },
      { name: 'zzz', dock: 'yyy' },
    ]);
    expect(b.rows).toEqual(a.rows);
  });

  it('takes the first line as the header of names (§2.3)', async () => {
    const { rows, summary } = await run(
      'field_name,field_name2,field_name3\r\naaa,bbb,ccc\r\nzzz,yyy,xxx\r\n',
    );
    expect(rows).toEqual([
      { field_name: 'aaa', field_name2: 'bbb', field_name3: 'ccc' },
      { field_name: 'zzz', field_name2: 'yyy', field_name3: 'xxx' },
    ]);
    expect(summary.rowsRead).toBe(2);
  });

  it('keeps spaces as part of a field (§2.4)', async () => {
    const { rows } = await run('a,b\n  x , y\n');
    expect(rows).toEqual([{ a: '  x ', b: ' y' }]);
  });

  it('reads quoted fields, with commas inside them (§2.5, §2.6)', async () => {
    const { rows } = await run('part,note\r\n"aaa","b,bb"\r\nzzz,"brake pads, front"\r\n');
    expect(rows).toEqual([
      { part: 'aaa', note: 'b,bb' },
      { part: 'zzz', note: 'brake pads, front' },
    ]);
  });

  it('keeps a CRLF inside quotes as data and counts the record from its first line (§2.6)', async () => {
    const { rows, lines } = await run('a,b,c\r\n"aaa","b\r\nbb","ccc"\r\nzzz,yyy,xxx\r\n', {}, 3);
    expect(rows).toEqual([
      { a: 'aaa', b: 'b\r\nbb', c: 'ccc' },
      { a: 'zzz', b: 'yyy', c: 'xxx' },
    ]);
    expect(lines).toEqual([2, 4]);
  });

  it('turns a doubled quote inside a quoted field into one quote (§2.7)', async () => {
    const { rows } = await run('a,b,c\r\n"aaa","b""bb","ccc"\r\n');
    expect(rows).toEqual([{ a: 'aaa', b: 'b"bb', c: 'ccc' }]);
  });

  it('rejects a ragged row with its line number and writes the others (§2.4: same number of fields)', async () => {
    const { rows, rejects, summary } = await run('dock,bikes,slots\n1,2,3\n4,5\n6,7,8\n9,10,11,12\n');
    expect(rows).toEqual([
      { dock: '1', bikes: '2', slots: '3' },
      { dock: '6', bikes: '7', slots: '8' },
    ]);
    expect(rejects.map((r) => [r.line, r.reason, r.message, Buffer.from(r.raw).toString()])).toEqual([
      [3, 'column-count', 'expected 3 field(s), got 2', '4,5'],
      [5, 'column-count', 'expected 3 field(s), got 4', '9,10,11,12'],
    ]);
    expect(summary).toMatchObject({ rowsRead: 4, rowsWritten: 2, rowsRejected: 2, durable: true });
  });

  it('rejects quotes that RFC 4180 does not allow and reads on from the next line', async () => {
    const { rows, rejects } = await run('a,b\n1,x"y\n2,"x"y\n3,ok\n');
    expect(rows).toEqual([{ a: '3', b: 'ok' }]);
    expect(rejects.map((r) => [r.line, r.reason, r.column])).toEqual([
      [2, 'csv-syntax', 'b'],
      [3, 'csv-syntax', 'b'],
    ]);
  });

  it('rejects an unclosed quote at the end of the input after writing the rows before it', async () => {
    const { rows, rejects } = await run('a,b\n1,2\n3,"never closed\n4,5\n');
    expect(rows).toEqual([{ a: '1', b: '2' }]);
    expect(rejects).toHaveLength(1);
    expect(rejects[0]).toMatchObject({ line: 3, reason: 'csv-syntax', column: 'b' });
  });

  it('rejects a quoted record longer than maxRowBytes once, keeping its first bytes, and reads on after its closing quote', async () => {
    const { rows, rejects } = await run(`a,b\n1,"${'x'.repeat(40)}\n${'x'.repeat(60)}"\n4,5\n`, {
      maxRowBytes: 50,
    });
    expect(rows).toEqual([{ a: '4', b: '5' }]);
    expect(rejects).toMatchObject([{ line: 2, reason: 'too-long', truncated: true, column: 'b' }]);
    expect(rejects[0]!.raw.length).toBe(50);
  });

  it('rejects a record with invalid UTF-8, naming its column, and writes the rest', async () => {
    const bytes = Buffer.concat([
      Buffer.from('dock,note\nDK-1,caf\xc3\xa9\nDK-2,', 'latin1'),
      Buffer.from([0xff, 0xfe]),
      Buffer.from('\nDK-3,ok\n'),
    ]);
    const { rows, rejects } = await run(bytes);
    expect(rows).toEqual([
      { dock: 'DK-1', note: 'café' },
      { dock: 'DK-3', note: 'ok' },
    ]);
    expect(rejects).toMatchObject([{ line: 3, reason: 'utf8', column: 'note' }]);
    expect(Buffer.from(rejects[0]!.raw)).toEqual(
      Buffer.concat([Buffer.from('DK-2,'), Buffer.from([0xff, 0xfe])]),
    );
  });

  it('skips blank lines and a UTF-8 byte order mark, keeping physical line numbers', async () => {
    const { rows, lines, summary } = await run('\ufeffa,b\n\n1,2\r\n\r\n3,4\n');
    expect(rows).toEqual([
      { a: '1', b: '2' },
      { a: '3', b: '4' },
    ]);
    expect(lines).toEqual([3, 5]);
    expect(summary.blankLines).toBe(2);
  });

  it('reads a tab-separated file by position when there is no header', async () => {
    const { rows } = await run('DK-1\t4\nDK-2\t0\n', {
      header: false,
      delimiter: '\t',
      columns: [
        { name: 'dock', required: true },
        { name: 'bikes', type: 'integer' },
      ],
    });
    expect(rows).toEqual([
      { dock: 'DK-1', bikes: 4 },
      { dock: 'DK-2', bikes: 0 },
    ]);
  });

  it('stops at a header that lacks a required column', async () => {
    await expect(
      run('dock\nDK-1\n', { columns: [{ name: 'dock' }, { name: 'bikes', required: true }] }),
    ).rejects.toMatchObject({
      code: 'SPILLWAY_INPUT_ERROR',
      reason: 'header',
    });
  });
});
