// @spillway/ingest against a real PostgreSQL with the real adapter: a partner file with bad rows,
// an idempotent re-upload, the age bound while an upload goes silent, and the HTTP example.
import { once } from 'node:events';
import { mkdtemp, readFile, rm, stat, writeFile } from 'node:fs/promises';
import { request } from 'node:http';
import type { AddressInfo } from 'node:net';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { PassThrough, Readable } from 'node:stream';
import { type FlushReason, Sink } from '@spillway/core';
import { ManualClock } from '@spillway/core/testing';
import { type ColumnSpec, ingest, ingestFile, type Row } from '@spillway/ingest';
import { postgresAdapter, postgresSink } from '@spillway/postgres';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { createUploadServer, SERVICE_RECORDS_DDL } from '../../examples/partner-upload-server.js';
import { type TestSchema, waitFor, withSchema } from '../harness/index.js';

const COLUMNS: ColumnSpec[] = [
  { name: 'record_id', required: true, pattern: '^SR-\\d+$' },
  { name: 'dock_id', required: true, pattern: '^DK-\\d{4}$' },
  { name: 'bike_id', type: 'integer', required: true, min: 1 },
  { name: 'serviced_at', type: 'timestamp', required: true },
  { name: 'odometer_km', type: 'number', min: 0 },
  { name: 'passed', type: 'boolean' },
  { name: 'kind', enum: ['brakes', 'chain', 'tyre', 'battery', 'lights'] },
  { name: 'note' },
];
const NAMES = COLUMNS.map((c) => c.name);
const HEADER = `${NAMES.join(',')}\r\n`;

let db: TestSchema;
let dir: string;
beforeAll(async () => {
  db = await withSchema('ingest');
  dir = await mkdtemp(join(tmpdir(), 'spillway-ingest-it-'));
});
afterAll(async () => {
  await db?.drop();
  await rm(dir, { recursive: true, force: true });
});

async function table(name: string): Promise<string> {
  await db.pool.query(`CREATE TABLE ${name} (
    record_id text PRIMARY KEY, dock_id text NOT NULL, bike_id int NOT NULL, serviced_at timestamptz NOT NULL,
    odometer_km double precision, passed boolean, kind text, note text)`);
  return name;
}

function good(n: number): string {
  const note = n % 10 === 0 ? '"checked, twice\r\nsigned off"' : 'ok';
  return `SR-${n},DK-${String(n % 4000).padStart(4, '0')},${(n % 900) + 1},2024-05-01T10:${String(n % 60).padStart(2, '0')}:00Z,${n / 10},${n % 3 === 0},brakes,${note}\r\n`;
}

/** A 100,000-row partner file with 10 bad rows of different kinds; returns their lines and reasons. */
async function partnerFile(
  path: string,
): Promise<{ multiline: number; bad: Map<number, [string, string | undefined]> }> {
  const badAt = new Map<number, [string, string, string | undefined]>([
    [137, ['SR-137,DK-0137,1,2024-05-01T10:00:00Z,1,true,brakes\r\n', 'column-count', undefined]],
    [9_001, ['SR-9001,DK-0001,seven,2024-05-01T10:00:00Z,1,true,brakes,ok\r\n', 'type', 'bike_id']],
    [20_000, ['SR-20000,,5,2024-05-01T10:00:00Z,1,true,brakes,ok\r\n', 'required', 'dock_id']],
    [31_415, ['SR-31415,DK-0001,5,2024-13-01T10:00:00Z,1,true,brakes,ok\r\n', 'type', 'serviced_at']],
    [42_000, ['SR-42000,DK-0001,5,2024-05-01T10:00:00Z,1,true,brakes,caf\xe9\r\n', 'utf8', 'note']],
    [
      50_505,
      ['SR-50505,DK-0001,5,2024-05-01T10:00:00Z,1,true,brakes,a "quoted" word\r\n', 'csv-syntax', 'note'],
    ],
    [61_000, ['XR-61000,DK-0001,5,2024-05-01T10:00:00Z,1,true,brakes,ok\r\n', 'pattern', 'record_id']],
    [72_000, ['SR-72000,DK-0001,5,2024-05-01T10:00:00Z,1,true,saddle,ok\r\n', 'enum', 'kind']],
    [88_888, ['SR-88888,DK-0001,5,2024-05-01T10:00:00Z,-4,true,brakes,ok\r\n', 'range', 'odometer_km']],
    [99_999, ['SR-99999,DK-0001,5,2024-05-01T10:00:00Z,1,perhaps,brakes,ok\r\n', 'type', 'passed']],
  ]);
  const parts: Buffer[] = [Buffer.from(HEADER)];
  const bad = new Map<number, [string, string | undefined]>();
  // Physical lines: the header is line 1, and every tenth good row spans two lines.
  let line = 2;
  let multiline = 0;
  for (let n = 1; n <= 100_000; n++) {
    const b = badAt.get(n);
    if (b) {
      parts.push(Buffer.from(b[0], 'latin1'));
      bad.set(line, [b[1], b[2]]);
      line += 1;
    } else {
      const text = good(n);
      parts.push(Buffer.from(text));
      if (n % 10 === 0) multiline++;
      line += n % 10 === 0 ? 2 : 1;
    }
  }
  await writeFile(path, Buffer.concat(parts));
  return { multiline, bad };
}

describe('a partner file into PostgreSQL', () => {
  it('writes 99,990 rows and puts exactly the 10 bad ones in the reject file with line, column and reason', async () => {
    const name = await table('records_bad_rows');
    const path = join(dir, 'partner-42.csv');
    const rejectsPath = join(dir, 'partner-42.rejects.ndjson');
    const { bad, multiline } = await partnerFile(path);
    const sink = postgresSink<Row>({
      pool: db.pool,
      table: name,
      columns: NAMES,
      map: (r) => NAMES.map((c) => r[c]),
      mode: 'copy',
      maxRecords: 5000,
    });

    const summary = await ingestFile(path, sink, { columns: COLUMNS, rejects: rejectsPath });
    await sink.close();

    expect(summary).toMatchObject({
      rowsRead: 100_000,
      rowsWritten: 99_990,
      rowsRejected: 10,
      rowsDeadLettered: 0,
      durable: true,
    });
    const { rows } = await db.pool.query(
      `SELECT count(*)::int AS n, count(*) FILTER (WHERE note LIKE E'checked, twice\\r\\nsigned off')::int AS multiline FROM ${name}`,
    );
    // Rows whose quoted note holds a CRLF landed with it (RFC 4180 §2.6), and line numbers still hold below.
    expect(rows[0]).toEqual({ n: 99_990, multiline });
    expect((await stat(rejectsPath)).mode & 0o777).toBe(0o600);
    const lines = (await readFile(rejectsPath, 'utf8'))
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l) as { line: number; reason: string; column: string | null });
    expect(lines.map((l) => [l.line, l.reason, l.column ?? undefined])).toEqual(
      [...bad].map(([line, [reason, column]]) => [line, reason, column]),
    );
    // None of the rejected record ids reached the table.
    const ids = await db.pool.query(`SELECT count(*)::int AS n FROM ${name} WHERE record_id = ANY($1)`, [
      ['SR-137', 'SR-9001', 'SR-20000', 'SR-99999'],
    ]);
    expect(ids.rows[0].n).toBe(0);
  });

  it('leaves an upsert table unchanged when the same file is uploaded again', async () => {
    const name = await table('records_reupload');
    const path = join(dir, 'partner-7.csv');
    const body = Array.from({ length: 5000 }, (_, i) => good(i + 1)).join('');
    await writeFile(path, HEADER + body);
    const upload = async () => {
      const sink = postgresSink<Row>({
        pool: db.pool,
        table: name,
        columns: NAMES,
        map: (r) => NAMES.map((c) => r[c]),
        mode: 'upsert',
        conflict: { key: ['record_id'] },
      });
      const s = await ingestFile(path, sink, { columns: COLUMNS });
      await sink.close();
      return s;
    };
    const fingerprint = async () =>
      (
        await db.pool.query(
          `SELECT count(*)::int AS n, md5(string_agg(t::text, '|' ORDER BY record_id)) AS digest FROM ${name} t`,
        )
      ).rows[0] as { n: number; digest: string };

    const first = await upload();
    const before = await fingerprint();
    const second = await upload();
    const after = await fingerprint();
    expect(first.rowsWritten).toBe(5000);
    expect(second.rowsWritten).toBe(5000);
    expect(before.n).toBe(5000);
    expect(after).toEqual(before);

    // A corrected re-upload changes exactly the rows it corrects.
    await writeFile(path, HEADER + body.replace('SR-17,DK-0017,18,', 'SR-17,DK-0017,19,'));
    await upload();
    const changed = await db.pool.query(`SELECT bike_id FROM ${name} WHERE record_id = 'SR-17'`);
    expect(changed.rows[0].bike_id).toBe(19);
    expect((await fingerprint()).n).toBe(5000);
  });

  it('keeps the last row of a key that a file corrects further down, even with batches in flight in parallel', async () => {
    const name = await table('records_corrections');
    const path = join(dir, 'partner-corrections.csv');
    // SR-1 … SR-3000, then a correction of every tenth record: the corrections must win.
    const rows = Array.from({ length: 3000 }, (_, i) => good(i + 1));
    const corrections = Array.from(
      { length: 300 },
      (_, i) => `SR-${(i + 1) * 10},DK-0001,999,2024-06-01T00:00:00Z,0,true,chain,corrected\r\n`,
    );
    await writeFile(path, HEADER + rows.join('') + corrections.join(''));
    const sink = postgresSink<Row>({
      pool: db.pool,
      table: name,
      columns: NAMES,
      map: (r) => NAMES.map((c) => r[c]),
      mode: 'upsert',
      conflict: { key: ['record_id'] },
      maxRecords: 200,
      concurrency: 4,
    });
    const summary = await ingestFile(path, sink, { columns: COLUMNS });
    await sink.close();
    expect(summary.rowsWritten).toBe(3300);
    const { rows: got } = await db.pool.query(
      `SELECT count(*)::int AS n, count(*) FILTER (WHERE bike_id = 999)::int AS corrected FROM ${name}`,
    );
    expect(got[0]).toEqual({ n: 3000, corrected: 300 });
  });

  it('makes every row of a 5 MB upload that then goes silent durable at maxAgeMs, before the upload ends', async () => {
    const name = await table('records_silence');
    const clock = new ManualClock();
    const maxAgeMs = 1000;
    // No idle flush: only size and age can send rows while the upload stays open.
    const sink = new Sink(
      postgresAdapter<Row>({
        pool: db.pool,
        table: name,
        columns: NAMES,
        map: (r) => NAMES.map((c) => r[c]),
        mode: 'copy',
      }),
      {
        maxRecords: 1000,
        maxAgeMs,
        idleMs: 0,
        clock,
      },
    );
    const reasons: FlushReason[] = [];
    sink.on('flush', (f) => reasons.push(f.reason));
    const upload = new PassThrough();
    let read = 0;
    const done = ingest(upload, sink, {
      format: 'csv',
      columns: COLUMNS,
      progressIntervalMs: 0,
      onProgress: (p) => (read = p.rowsRead),
    });

    upload.write(HEADER);
    let n = 0;
    let bytes = 0;
    while (bytes < 5 * 1024 * 1024) {
      const text = good(++n);
      bytes += Buffer.byteLength(text);
      upload.write(text);
    }
    const tail = n % 1000;
    expect(tail).toBeGreaterThan(0);
    // The input stays open (silence). Every complete row is parsed and accepted without more data.
    await waitFor(
      'all rows accepted',
      () => (read === n && sink.pending().inFlight === 0 ? true : undefined),
      { timeoutMs: 60_000, intervalMs: 20 },
    );
    const count = async () =>
      (await db.pool.query(`SELECT count(*)::int AS n FROM ${name}`)).rows[0].n as number;
    expect(sink.pending().buffered).toBe(tail);
    expect(await count()).toBe(n - tail);

    // Clock time has not moved since the rows arrived: 1 ms before the bound nothing leaves…
    await clock.advance(maxAgeMs - 1);
    expect(sink.pending().buffered).toBe(tail);
    expect(reasons).not.toContain('age');
    // …and at the bound the tail leaves by age, while the upload is still open.
    await clock.advance(1);
    await sink.drained();
    expect(reasons.filter((r) => r === 'age')).toHaveLength(1);
    expect(await count()).toBe(n);
    expect(upload.writableEnded).toBe(false);

    upload.end();
    const summary = await done;
    expect(summary).toMatchObject({ rowsRead: n, rowsWritten: n, durable: true });
    await sink.close();
  });
});

describe('timestamps and over-long records into PostgreSQL', () => {
  it('lands timestamps in timestamptz with every microsecond as sent, in copy, insert and upsert mode', async () => {
    const values = [
      '2024-05-01T10:00:00.123456Z',
      '2024-05-01T12:00:00.000001+02:00',
      '2024-05-01 10:00:00.5Z',
      '2024-05-01',
    ];
    // What PostgreSQL itself makes of the same texts is what must land.
    const expected = (
      await db.pool.query(
        `SELECT to_char(v::timestamptz AT TIME ZONE 'UTC', 'YYYY-MM-DD HH24:MI:SS.US') AS t FROM unnest($1::text[]) WITH ORDINALITY u(v, i) ORDER BY i`,
        [values.map((v) => (v.length === 10 ? `${v}T00:00:00Z` : v))],
      )
    ).rows.map((r) => r.t as string);
    expect(expected).toEqual([
      '2024-05-01 10:00:00.123456',
      '2024-05-01 10:00:00.000001',
      '2024-05-01 10:00:00.500000',
      '2024-05-01 00:00:00.000000',
    ]);
    for (const mode of ['copy', 'insert', 'upsert'] as const) {
      const name = `stamps_${mode}`;
      await db.pool.query(`CREATE TABLE ${name} (id int PRIMARY KEY, at timestamptz NOT NULL)`);
      const sink = postgresSink<Row>({
        pool: db.pool,
        table: name,
        columns: ['id', 'at'],
        map: (r) => [r.id, r.at],
        mode,
        ...(mode === 'upsert' && { conflict: { key: ['id'] } }),
      });
      const csv = `id,at\n${values.map((v, i) => `${i + 1},${v}`).join('\n')}\n`;
      const summary = await ingest(Readable.from([csv]), sink, {
        format: 'csv',
        columns: [
          { name: 'id', type: 'integer', required: true },
          { name: 'at', type: 'timestamp', required: true },
        ],
      });
      await sink.close();
      expect(summary).toMatchObject({ rowsWritten: 4, rowsRejected: 0 });
      const { rows } = await db.pool.query(
        `SELECT to_char(at AT TIME ZONE 'UTC', 'YYYY-MM-DD HH24:MI:SS.US') AS t FROM ${name} ORDER BY id`,
      );
      expect(rows.map((r) => r.t)).toEqual(expected);
    }
  });

  it('lands a leap second as PostgreSQL reads it: 23:59:60Z is the next day 00:00:00', async () => {
    await db.pool.query('CREATE TABLE stamps_leap (id int PRIMARY KEY, at timestamptz NOT NULL)');
    const sink = postgresSink<Row>({
      pool: db.pool,
      table: 'stamps_leap',
      columns: ['id', 'at'],
      map: (r) => [r.id, r.at],
      mode: 'copy',
    });
    // Source: RFC 3339, section 5.8, the leap second examples.
    const csv = 'id,at\n1,1990-12-31T23:59:60Z\n2,1990-12-31T15:59:60-08:00\n';
    await ingest(Readable.from([csv]), sink, {
      format: 'csv',
      columns: [
        { name: 'id', type: 'integer' },
        { name: 'at', type: 'timestamp' },
      ],
    });
    await sink.close();
    const { rows } = await db.pool.query(
      `SELECT to_char(at AT TIME ZONE 'UTC', 'YYYY-MM-DD HH24:MI:SS') AS t FROM stamps_leap ORDER BY id`,
    );
    expect(rows.map((r) => r.t)).toEqual(['1991-01-01 00:00:00', '1991-01-01 00:00:00']);
  });

  it('never lands the inner lines of an over-long quoted record in the table', async () => {
    await db.pool.query('CREATE TABLE long_quoted (id int PRIMARY KEY, name text)');
    const sink = postgresSink<Row>({
      pool: db.pool,
      table: 'long_quoted',
      columns: ['id', 'name'],
      map: (r) => [r.id, r.name],
      mode: 'copy',
    });
    const path = join(dir, 'long-quoted.csv');
    await writeFile(path, `id,name\n1,a\n2,"${'y'.repeat(200)}\n99,injected\n${'z'.repeat(20)}"\n3,c\n`);
    const rejectsPath = join(dir, 'long-quoted.rejects.ndjson');
    const summary = await ingestFile(path, sink, {
      columns: [{ name: 'id', type: 'integer', required: true }, { name: 'name' }],
      maxRowBytes: 64,
      rejects: rejectsPath,
    });
    await sink.close();
    const { rows } = await db.pool.query('SELECT id FROM long_quoted ORDER BY id');
    expect(rows.map((r) => r.id)).toEqual([1, 3]);
    const rejects = (await readFile(rejectsPath, 'utf8'))
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l));
    expect(rejects.map((r) => [r.line, r.reason])).toEqual([[3, 'too-long']]);
    expect(summary).toMatchObject({ rowsRead: 3, rowsWritten: 2, rowsRejected: 1 });
  });
});

describe('the partner upload server example', () => {
  function post(
    port: number,
    path: string,
    type: string,
    chunks: string[],
  ): Promise<{ status: number; body: Record<string, unknown> }> {
    return new Promise((resolve, reject) => {
      // No Content-Length: the body goes chunked, as a streaming client sends it.
      const req = request(
        { host: '127.0.0.1', port, path, method: 'POST', headers: { 'content-type': type } },
        (res) => {
          let text = '';
          res.setEncoding('utf8');
          res.on('data', (d) => (text += d));
          res.on('end', () =>
            resolve({ status: res.statusCode ?? 0, body: JSON.parse(text) as Record<string, unknown> }),
          );
        },
      );
      req.on('error', reject);
      (async () => {
        for (const c of chunks) {
          if (!req.write(c)) await once(req, 'drain');
        }
        req.end();
      })().catch(reject);
    });
  }

  it('answers a chunked upload with its summary only after the rows are in PostgreSQL', async () => {
    await db.pool.query(SERVICE_RECORDS_DDL);
    const rejectsDir = await mkdtemp(join(dir, 'rejects-'));
    const app = createUploadServer({ pool: db.pool, rejectsDir, maxBodyBytes: 4 * 1024 * 1024 });
    app.server.listen(0, '127.0.0.1');
    await once(app.server, 'listening');
    const { port } = app.server.address() as AddressInfo;
    try {
      const rows = Array.from({ length: 3000 }, (_, i) => good(i + 1));
      rows[99] = 'SR-100,DK-0100,x,2024-05-01T10:00:00Z,1,true,brakes,ok\r\n';
      const chunks = [
        HEADER,
        ...Array.from({ length: 30 }, (_, k) => rows.slice(k * 100, k * 100 + 100).join('')),
      ];
      const res = await post(port, '/uploads/velofix', 'text/csv', chunks);
      // Counted the moment the answer arrives: the server must not answer before the rows are durable.
      const inTable = (
        await db.pool.query(`SELECT count(*)::int AS n FROM service_records WHERE partner = 'velofix'`)
      ).rows[0].n;
      expect(res.status).toBe(200);
      expect(res.body).toMatchObject({ rowsRead: 3000, rowsWritten: 2999, rowsRejected: 1, durable: true });
      expect((res.body.firstRejects as unknown[])[0]).toEqual({
        line: expect.any(Number),
        column: 'bike_id',
        reason: 'type',
        message: 'expected an integer',
      });
      expect(inTable).toBe(2999);

      const ndjson = await post(port, '/uploads/velofix', 'application/x-ndjson; charset=utf-8', [
        '{"record_id":"SR-900001","dock_id":"DK-0001","bike_id":3,"serviced_at":"2024-05-01T10:00:00Z"}\n',
        '{"record_id":"SR-900002","dock_id":"DK-0001","bike_id":4,"serviced_at":"2024-05-01T10:00:00Z"}',
      ]);
      expect(ndjson.status).toBe(200);
      expect(ndjson.body).toMatchObject({ rowsWritten: 2, durable: true });
    } finally {
      await app.close();
    }
  });

  it('answers 413 past the size limit, 400 for a malformed upload and 415 for another content type', async () => {
    await db.pool.query(SERVICE_RECORDS_DDL);
    const app = createUploadServer({
      pool: db.pool,
      table: 'service_records',
      maxBodyBytes: 64 * 1024,
      maxRejects: 5,
    });
    app.server.listen(0, '127.0.0.1');
    await once(app.server, 'listening');
    const { port } = app.server.address() as AddressInfo;
    try {
      const big = Array.from({ length: 2000 }, (_, i) => good(500_000 + i));
      const tooLarge = await post(port, '/uploads/bigco', 'text/csv', [
        HEADER,
        ...Array.from({ length: 20 }, (_, k) => big.slice(k * 100, k * 100 + 100).join('')),
      ]);
      expect(tooLarge.status).toBe(413);
      expect(tooLarge.body).toMatchObject({ durable: true, stopped: 'too-large' });

      const badHeader = await post(port, '/uploads/bigco', 'text/csv', [
        'record_id,dock\r\nSR-1,DK-0001\r\n',
      ]);
      expect(badHeader.status).toBe(400);
      expect(String(badHeader.body.error)).toMatch(/lacks required column/);

      const garbage = await post(port, '/uploads/bigco', 'application/x-ndjson', ['not json\n'.repeat(10)]);
      expect(garbage.status).toBe(400);
      expect(garbage.body).toMatchObject({ stopped: 'reject-limit', rowsRejected: 6, rowsWritten: 0 });

      const wrongType = await post(port, '/uploads/bigco', 'application/json', ['{}']);
      expect(wrongType.status).toBe(415);
    } finally {
      await app.close();
    }
  });
});
