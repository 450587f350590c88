import { mkdtemp, readFile, rm, stat, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { PassThrough, Readable } from 'node:stream';
import v8 from 'node:v8';
import { runInNewContext } from 'node:vm';
import { type FlushReason, Sink } from '@spillway/core';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { z } from 'zod';
import {
  type ColumnSpec,
  CsvLine,
  IngestError,
  ingest,
  ingestFile,
  type Reject,
  RejectFile,
  type Row,
} from '../src/index.js';
import { MemoryAdapter } from './memory-adapter.js';

let dir: string;
beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'spillway-ingest-'));
});
afterAll(async () => {
  await rm(dir, { recursive: true, force: true });
});

const SERVICE_COLUMNS: ColumnSpec[] = [
  { name: 'record_id', type: 'string', required: true, pattern: '^SR-\\d+$' },
  { name: 'dock_id', type: 'string', required: true },
  { name: 'bike_id', type: 'integer', required: true, min: 1 },
  { name: 'serviced_at', type: 'timestamp', required: true },
  { name: 'odometer_km', type: 'number', min: 0 },
  { name: 'passed', type: 'boolean' },
  { name: 'kind', enum: ['brakes', 'chain', 'tyre', 'battery'] },
  { name: 'parts', type: 'json' },
];

describe('validation against declared columns', () => {
  it('converts each type and rejects each kind of bad value with its column and reason', async () => {
    const csv = [
      'record_id,dock_id,bike_id,serviced_at,odometer_km,passed,kind,parts',
      'SR-1,DK-0042,17,2024-05-01T10:22:00Z,1234.5,true,brakes,"[""pad""]"',
      'SR-2,DK-0042,18,2024-05-01,,no,chain,',
      'XX-3,DK-0042,19,2024-05-01T10:22:00Z,1,true,tyre,', // pattern
      'SR-4,,19,2024-05-01T10:22:00Z,1,true,tyre,', // required
      'SR-5,DK-1,nineteen,2024-05-01T10:22:00Z,1,true,tyre,', // type
      'SR-6,DK-1,0,2024-05-01T10:22:00Z,1,true,tyre,', // range
      'SR-7,DK-1,7,2024-02-30T10:22:00Z,1,true,tyre,', // calendar
      'SR-8,DK-1,7,2024-05-01T10:22:00,1,true,tyre,', // no offset
      'SR-9,DK-1,7,2024-05-01T10:22:00+02:00,1,maybe,tyre,', // boolean
      'SR-10,DK-1,7,2024-05-01T10:22:00Z,1,true,saddle,', // enum
      'SR-11,DK-1,7,2024-05-01T10:22:00Z,1,true,tyre,{oops', // json
      'SR-12,DK-1,9007199254740993,2024-05-01T10:22:00Z,1,true,tyre,', // beyond 2^53
    ].join('\n');
    const adapter = new MemoryAdapter<Row>();
    const sink = new Sink(adapter);
    const rejects: Array<[number, string | undefined, string]> = [];
    const summary = await ingest(Readable.from([csv]), sink, {
      format: 'csv',
      columns: SERVICE_COLUMNS,
      rejects: { write: (r) => void rejects.push([r.line, r.column, r.reason]) },
    });
    expect(adapter.stored).toEqual([
      {
        record_id: 'SR-1',
        dock_id: 'DK-0042',
        bike_id: 17,
        serviced_at: '2024-05-01T10:22:00Z',
        odometer_km: 1234.5,
        passed: true,
        kind: 'brakes',
        parts: ['pad'],
      },
      {
        record_id: 'SR-2',
        dock_id: 'DK-0042',
        bike_id: 18,
        serviced_at: '2024-05-01T00:00:00Z',
        odometer_km: null,
        passed: false,
        kind: 'chain',
        parts: null,
      },
    ]);
    expect(rejects).toEqual([
      [4, 'record_id', 'pattern'],
      [5, 'dock_id', 'required'],
      [6, 'bike_id', 'type'],
      [7, 'bike_id', 'range'],
      [8, 'serviced_at', 'type'],
      [9, 'serviced_at', 'type'],
      [10, 'passed', 'type'],
      [11, 'kind', 'enum'],
      [12, 'parts', 'type'],
      [13, 'bike_id', 'range'],
    ]);
    expect(summary).toMatchObject({
      rowsRead: 12,
      rowsWritten: 2,
      rowsRejected: 10,
      rejectsByReason: { pattern: 1, required: 1, type: 5, range: 2, enum: 1 },
    });
    await sink.close();
  });

  it('takes NDJSON values of the right JSON type as they are, and text as in CSV', async () => {
    const adapter = new MemoryAdapter<Row>();
    const sink = new Sink(adapter);
    const rejects: Array<[number, string | undefined, string]> = [];
    await ingest(
      Readable.from([
        '{"dock":"DK-1","bikes":4,"open":true}\n{"dock":"DK-2","bikes":"5","open":"f"}\n{"dock":"DK-3","bikes":4.5}\n{"bikes":1}\n',
      ]),
      sink,
      {
        format: 'ndjson',
        columns: [
          { name: 'dock', required: true },
          { name: 'bikes', type: 'integer' },
          { name: 'open', type: 'boolean' },
        ],
        rejects: { write: (r) => void rejects.push([r.line, r.column, r.reason]) },
      },
    );
    expect(adapter.stored).toEqual([
      { dock: 'DK-1', bikes: 4, open: true },
      { dock: 'DK-2', bikes: 5, open: false },
    ]);
    expect(rejects).toEqual([
      [3, 'bikes', 'type'],
      [4, 'dock', 'required'],
    ]);
    await sink.close();
  });

  it('accepts a zod schema through the Standard Schema interface and reports the issue path', async () => {
    const schema = z.object({
      dock_id: z.string().regex(/^DK-\d{4}$/),
      bikes: z.coerce.number().int().min(0),
    });
    const adapter = new MemoryAdapter<Row>();
    const sink = new Sink(adapter);
    const rejects: Array<[number, string | undefined, string]> = [];
    await ingest(Readable.from(['dock_id,bikes\nDK-0001,4\nDK-1,3\nDK-0002,-1\nDK-0003,2\n']), sink, {
      format: 'csv',
      schema,
      rejects: { write: (r) => void rejects.push([r.line, r.column, r.reason]) },
    });
    expect(adapter.stored).toEqual([
      { dock_id: 'DK-0001', bikes: 4 },
      { dock_id: 'DK-0003', bikes: 2 },
    ]);
    expect(rejects).toEqual([
      [3, 'dock_id', 'schema'],
      [4, 'bikes', 'schema'],
    ]);
    await sink.close();
  });

  it('rejects a row whose map throws, and passes the line to map', async () => {
    const adapter = new MemoryAdapter<{ id: string; line: number }>();
    const sink = new Sink(adapter);
    const summary = await ingest(Readable.from(['{"id":"a"}\n{"id":"boom"}\n{"id":"c"}\n']), sink, {
      format: 'ndjson',
      map: (row, { line }) => {
        if (row.id === 'boom') throw new RangeError('unmappable');
        return { id: String(row.id), line };
      },
    });
    expect(adapter.stored).toEqual([
      { id: 'a', line: 1 },
      { id: 'c', line: 3 },
    ]);
    expect(summary.firstRejects).toEqual([
      { line: 2, column: undefined, reason: 'map', message: 'unmappable' },
    ]);
    await sink.close();
  });
});

describe('missing values', () => {
  it('NDJSON: an empty string is a value (lands as "" in a text column, refused by a number column); only an absent property or null is missing', async () => {
    const adapter = new MemoryAdapter<Row>();
    const sink = new Sink(adapter);
    const input = [
      '{"dock":"DK-1","note":"","bikes":1}',
      '{"dock":"","note":null,"bikes":2}',
      '{"dock":"DK-3","bikes":""}',
      '{"note":"x","bikes":4}',
      '',
    ].join('\n');
    const summary = await ingest(Readable.from([input]), sink, {
      format: 'ndjson',
      columns: [{ name: 'dock', required: true }, { name: 'note' }, { name: 'bikes', type: 'integer' }],
    });
    expect(adapter.stored).toEqual([
      { dock: 'DK-1', note: '', bikes: 1 },
      { dock: '', note: null, bikes: 2 },
    ]);
    expect(summary.firstRejects.map((r) => [r.line, r.column, r.reason])).toEqual([
      [3, 'bikes', 'type'],
      [4, 'dock', 'required'],
    ]);
    await sink.close();
  });

  it('CSV: an empty field is missing (null, or refused when required)', async () => {
    const adapter = new MemoryAdapter<Row>();
    const sink = new Sink(adapter);
    const summary = await ingest(Readable.from(['dock,note\nDK-1,\n,x\n']), sink, {
      format: 'csv',
      columns: [{ name: 'dock', required: true }, { name: 'note' }],
    });
    expect(adapter.stored).toEqual([{ dock: 'DK-1', note: null }]);
    expect(summary.firstRejects.map((r) => [r.line, r.column, r.reason])).toEqual([[3, 'dock', 'required']]);
    await sink.close();
  });
});

describe('reject files', () => {
  it('writes NDJSON rejects 0600 with line, column, reason and the raw row (base64 when not UTF-8)', async () => {
    const path = join(dir, 'rejects.ndjson');
    const sink = new Sink(new MemoryAdapter<Row>());
    const input = Buffer.concat([
      Buffer.from('dock,bikes\nDK-1,x\nDK-2,'),
      Buffer.from([0xff]),
      Buffer.from('\nDK-3,3\n'),
    ]);
    const summary = await ingest(Readable.from([input]), sink, {
      format: 'csv',
      columns: [{ name: 'dock' }, { name: 'bikes', type: 'integer' }],
      rejects: path,
    });
    expect(summary.rowsRejected).toBe(2);
    expect((await stat(path)).mode & 0o777).toBe(0o600);
    const lines = (await readFile(path, 'utf8'))
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l));
    expect(lines).toEqual([
      {
        line: 2,
        column: 'bikes',
        reason: 'type',
        message: 'expected an integer',
        truncated: false,
        raw: 'DK-1,x',
      },
      {
        line: 3,
        column: 'bikes',
        reason: 'utf8',
        message: 'not valid UTF-8',
        truncated: false,
        rawBase64: Buffer.from('DK-2,\xff', 'latin1').toString('base64'),
      },
    ]);
    await sink.close();
  });

  it('writes CSV rejects with RFC 4180 quoting and the raw bytes unchanged, even over an existing file', async () => {
    const path = join(dir, 'rejects.csv');
    await writeFile(path, 'old', { mode: 0o644 });
    const sink = new Sink(new MemoryAdapter<Row>());
    await ingest(Readable.from(['a,b\n"x, ""y""",1,extra\n']), sink, { format: 'csv', rejects: path });
    expect((await stat(path)).mode & 0o777).toBe(0o600);
    expect(await readFile(path, 'utf8')).toBe(
      'line,column,reason,message,truncated,raw\r\n2,,column-count,"expected 2 field(s), got 3",false,"""x, """"y"""""",1,extra"\r\n',
    );
    await sink.close();
  });

  it('puts rows the store refuses into the same reject file, with their line', async () => {
    const path = join(dir, 'with-store.ndjson');
    const rejects = new RejectFile(path);
    const adapter = new MemoryAdapter<Row>();
    adapter.refuse = (r) => r.dock === 'DK-2';
    const sink = new Sink(adapter, { deadLetter: rejects.deadLetterTarget() });
    const summary = await ingest(
      Readable.from(['{"dock":"DK-1"}\n{"dock":"DK-2"}\n{"dock":"DK-3"}\n']),
      sink,
      { format: 'ndjson', rejects },
    );
    expect(summary).toMatchObject({
      rowsRead: 3,
      rowsWritten: 2,
      rowsDeadLettered: 1,
      rowsRejected: 0,
      durable: true,
    });
    await sink.close();
    await rejects.close();
    const [line] = (await readFile(path, 'utf8'))
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l));
    expect(line).toMatchObject({ line: 2, reason: 'store', raw: '{"dock":"DK-2"}' });
  });
});

describe('stopping and flushing', () => {
  it('stops once more than maxRejects rows are rejected, after writing the valid rows before it', async () => {
    const sink = new Sink(new MemoryAdapter<Row>());
    const input = ['a\n', '1\n', 'x,y\n', '2\n', 'x,y\n', '3\n', '4\n'].join('');
    const error = await ingest(Readable.from([input]), sink, { format: 'csv', maxRejects: 1 }).catch(
      (e: unknown) => e,
    );
    expect(error).toBeInstanceOf(IngestError);
    const e = error as IngestError;
    expect(e).toMatchObject({ code: 'SPILLWAY_INPUT_ERROR', reason: 'reject-limit' });
    expect(e.summary).toMatchObject({
      rowsWritten: 2,
      rowsRejected: 2,
      durable: true,
      stopped: 'reject-limit',
    });
    await sink.close();
  });

  it('stops an input larger than maxInputBytes without destroying the stream', async () => {
    const sink = new Sink(new MemoryAdapter<Row>());
    const input = new PassThrough();
    input.write('{"a":1}\n'.repeat(100));
    input.end();
    const error = (await ingest(input, sink, { format: 'ndjson', maxInputBytes: 100 }).catch(
      (e: unknown) => e,
    )) as IngestError;
    expect(error.reason).toBe('too-large');
    expect(input.destroyed).toBe(false);
    await sink.close();
  });

  it('flushes the last partial batch at the end of input, not at the age bound', async () => {
    // maxAgeMs of an hour and no idle flush: only the end of input can send the tail.
    const adapter = new MemoryAdapter<Row>();
    const sink = new Sink(adapter, { maxRecords: 1000, maxAgeMs: 3_600_000, idleMs: 0 });
    const reasons: FlushReason[] = [];
    sink.on('flush', (f) => reasons.push(f.reason));
    const summary = await ingest(Readable.from(['{"a":1}\n'.repeat(2500)]), sink, { format: 'ndjson' });
    expect(summary).toMatchObject({ rowsWritten: 2500, durable: true });
    expect(reasons).toEqual(['size', 'size', 'manual']);
    expect(sink.snapshot().bufferedRecords).toBe(0);
    await sink.close();
  });

  it('counts only its own rows when another writer shares the sink', async () => {
    const sink = new Sink(new MemoryAdapter<Row>());
    const other = (async () => {
      for (let i = 0; i < 500; i++) await sink.write({ other: i });
    })();
    const summary = await ingest(Readable.from(['{"a":1}\n'.repeat(300)]), sink, { format: 'ndjson' });
    await other;
    expect(summary.rowsWritten).toBe(300);
    await sink.close();
  });

  it('reads a file with the format from its extension and reports bytes and line counts', async () => {
    const path = join(dir, 'service-records.ndjson');
    await writeFile(path, '{"a":1}\n{"a":2}\n');
    const sink = new Sink(new MemoryAdapter<Row>());
    const summary = await ingestFile(path, sink);
    expect(summary).toMatchObject({
      source: 'service-records.ndjson',
      format: 'ndjson',
      rowsRead: 2,
      rowsWritten: 2,
      bytesRead: 16,
      lastLine: 2,
    });
    await sink.close();
  });

  it('refuses an unknown option, naming it', async () => {
    const sink = new Sink(new MemoryAdapter<Row>());
    await expect(
      ingest(Readable.from(['']), sink, { format: 'csv', maxRejectz: 1 } as never),
    ).rejects.toThrow(/`maxRejectz`/);
    await expect(ingest(Readable.from(['']), sink, { format: 'csv', delimiter: '""' })).rejects.toThrow(
      /`delimiter`/,
    );
    await sink.close();
  });

  it('refuses every bad option with a TypeError coded SPILLWAY_INVALID_OPTION that names the option', async () => {
    const sink = new Sink(new MemoryAdapter<Row>());
    const bad: Array<[string, Record<string, unknown>]> = [
      ['format', {}], // a stream's format cannot be guessed
      ['format', { format: 'xml' }],
      ['header', { format: 'csv', header: 'yes' }],
      ['maxRowBytes', { format: 'csv', maxRowBytes: 0 }],
      ['maxRejects', { format: 'csv', maxRejects: -1 }],
      ['maxInputBytes', { format: 'csv', maxInputBytes: 1.5 }],
      ['blankLines', { format: 'ndjson', blankLines: 'keep' }],
      ['rejectFormat', { format: 'csv', rejects: 'x.ndjson', rejectFormat: 'xml' }],
      ['map', { format: 'csv', map: 'upper' }],
      ['onProgress', { format: 'csv', onProgress: 1 }],
      ['progressIntervalMs', { format: 'csv', progressIntervalMs: -1 }],
      ['columns[0].required', { format: 'csv', columns: [{ name: 'a', required: 'yes' }] }],
      ['columns[0].type', { format: 'csv', columns: [{ name: 'a', type: 'date' }] }],
      ['asCsvLine', { format: 'csv', asCsvLine: 'yes' }],
      ['asCsvLine', { format: 'csv', asCsvLine: (l: unknown) => l, map: (r: unknown) => r }],
      [
        'asCsvLine',
        {
          format: 'csv',
          asCsvLine: (l: unknown) => l,
          schema: { '~standard': { version: 1, vendor: 'test', validate: (v: unknown) => ({ value: v }) } },
        },
      ],
    ];
    for (const [name, options] of bad) {
      const error = await ingest(Readable.from(['']), sink, options as never).catch((e: unknown) => e);
      expect(error, name).toBeInstanceOf(TypeError);
      expect((error as TypeError & { code: string }).code, name).toBe('SPILLWAY_INVALID_OPTION');
      expect((error as Error).message, name).toContain(`\`${name}\``);
    }
    await sink.close();
  });
});

describe('bounded memory', () => {
  it('retains no more memory at the end of a 32 MiB input than a quarter of the way in', async () => {
    // Robust on a noisy machine: memory is read after a forced full GC (so garbage not yet
    // collected does not count), and the bound is far below the input's size, so an ingest that
    // held the input or its rows would fail it whatever the timing.
    v8.setFlagsFromString('--expose-gc');
    const gc = runInNewContext('gc') as () => void;
    const row = 'SR-000000,DK-0042,17,2024-05-01T10:22:00Z,1234.5,true,brakes,"pads, front and rear"\n';
    const total = 32 * 1024 * 1024;
    const rowsWanted = Math.ceil(total / row.length);
    function* generate() {
      yield 'record_id,dock_id,bike_id,serviced_at,odometer_km,passed,kind,note\n';
      const block = row.repeat(1000);
      for (let i = 0; i < rowsWanted; i += 1000) yield block;
    }
    const adapter = new MemoryAdapter<Row>();
    adapter.discard = true;
    const sink = new Sink(adapter, { maxRecords: 2000 });
    const retained: number[] = [];
    let nextSample = 0;
    let peakPending = 0;
    const summary = await ingest(Readable.from(generate()), sink, {
      format: 'csv',
      columns: [
        { name: 'record_id', required: true },
        { name: 'bike_id', type: 'integer' },
        { name: 'serviced_at', type: 'timestamp' },
      ],
      progressIntervalMs: 0,
      onProgress: (p) => {
        const pending = sink.pending();
        peakPending = Math.max(peakPending, pending.buffered + pending.inFlight);
        if (p.bytesRead >= nextSample) {
          nextSample += total / 8;
          gc();
          retained.push(process.memoryUsage().heapUsed);
        }
      },
    });
    expect(summary.rowsWritten).toBeGreaterThanOrEqual(rowsWanted);
    expect(peakPending).toBeLessThanOrEqual(sink.options.maxPendingRecords);
    expect(retained.length).toBeGreaterThanOrEqual(8);
    const quarter = retained[2]!;
    const growth = Math.max(...retained.slice(2)) - quarter;
    // 32 MiB of input went through; growth of a few MiB is noise, 8 MiB would mean rows are kept.
    expect(growth).toBeLessThan(8 * 1024 * 1024);
    await sink.close();
    // About 3 s of CPU; the generous limit is for a machine shared with other builds, where this
    // process gets a small share of a core. It bounds nothing about speed.
  }, 180_000);
});

describe('CSV rows as their own text (asCsvLine)', () => {
  it('hands valid rows on as CsvLines whose row() is the row the ingest would have built', async () => {
    const csv = 'a,b,c\r\nr1,x,y\r\nr2,,"q, ""z"""\nr3,lone\rcr,y\nr4,only two\n,,\n';
    const lines = new MemoryAdapter<Row | CsvLine>();
    const objects = new MemoryAdapter<Row>();
    const a = new Sink(lines);
    const b = new Sink(objects);
    const rejects: Reject[] = [];
    await ingest(Readable.from([csv]), a, {
      format: 'csv',
      asCsvLine: (line) => line,
      rejects: { write: (r) => void rejects.push(r) },
    });
    await ingest(Readable.from([csv]), b, { format: 'csv' });
    await a.close();
    await b.close();
    const stored = lines.stored;
    expect(stored.map((r) => (r instanceof CsvLine ? r.row() : r))).toEqual(objects.stored);
    // r3 has a CR outside quotes: a row object; the others are lines, empty fields written "".
    expect(stored.map((r) => (r instanceof CsvLine ? r.bytes.toString() : 'object'))).toEqual([
      'r1,x,y',
      'r2,"","q, ""z"""',
      'object',
      '"","",""',
    ]);
    expect(rejects.map((r) => [r.line, r.reason])).toEqual([[5, 'column-count']]);
  });
});
