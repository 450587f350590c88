// Hostile values through every mode of @spillway/postgres come back byte for byte.
// Source: PostgreSQL documentation, COPY, "File Formats" (what text and CSV must escape: tab,
// newline, carriage return, backslash, \N and NULL versus the empty string, quotes) and
// "Character Set Support" (UTF-8 text is stored as sent).
import { type DeadLetter, driverCodeOf, Sink } from '@spillway/core';
import { type PostgresAdapterOptions, postgresAdapter } from '@spillway/postgres';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { type TestSchema, withSchema } from '../harness/index.js';

const hostile: ReadonlyArray<string | null> = [
  'tab\there',
  'new\nline',
  'carriage\rreturn',
  'crlf\r\nend',
  '\\N',
  '\\\\N',
  'N',
  '\\',
  '\\\\',
  'C:\\bikes\\new (a backslash before n, not a newline)',
  '\\.',
  '\\.\n',
  'ends with a backslash\\',
  '\\x41 (looks like bytea hex)',
  '"',
  '""',
  "'",
  `it's "quoted", with, commas`,
  ',',
  '',
  null,
  ' ',
  '  leading and trailing  ',
  'NULL',
  'null',
  '\t\n\r\\',
  '\u0001\u001f control characters \u007f',
  '🚲🛴 emoji',
  'Zürich Straße, Kraków, Île-de-France',
  '東京駅 の ドック',
  'مرحبا بالدراجة',
  'e\u0301 combining accent',
  '\u2028 line and paragraph separators \u2029',
  '\u00a0non-breaking space',
  '\ufeffbyte order mark',
  'x'.repeat(1 << 20),
  `${'ü🚲\t\\'.repeat(100_000)}`,
];

interface Row {
  id: number;
  v: string | null;
  bytes: Buffer | null;
  tags: (string | null)[] | null;
  doc: unknown;
}

const allBytes = Buffer.from(Array.from({ length: 256 }, (_, i) => i));
const rows: Row[] = hostile.map((v, i) => ({
  id: i,
  v,
  bytes:
    i === 0 ? allBytes : i === 1 ? Buffer.alloc(0) : i === 2 ? null : Buffer.from(String(v ?? ''), 'utf8'),
  // Array elements and JSON strings carry the short hostile values (no NUL: the server refuses it in text).
  tags: v === null ? null : v.length > 200 ? [v.slice(0, 50)] : [v, null, 'plain'],
  doc: v === null ? null : { note: v.length > 200 ? v.slice(0, 50) : v, n: i },
}));

const MODES: Array<[string, Partial<PostgresAdapterOptions<Row>>]> = [
  ['insert', { mode: 'insert' }],
  ['copy csv', { mode: 'copy', copyFormat: 'csv' }],
  ['copy text', { mode: 'copy', copyFormat: 'text' }],
  ['upsert values', { mode: 'upsert', conflict: { key: ['id'] }, upsertViaCopyAbove: 1_000_000 }],
  [
    'upsert staging csv',
    { mode: 'upsert', conflict: { key: ['id'] }, upsertViaCopyAbove: 0, copyFormat: 'csv' },
  ],
  [
    'upsert staging text',
    { mode: 'upsert', conflict: { key: ['id'] }, upsertViaCopyAbove: 0, copyFormat: 'text' },
  ],
];

let schema: TestSchema;
beforeAll(async () => {
  schema = await withSchema('pgvalues');
});
afterAll(async () => {
  await schema?.drop();
});

const tableFor = (label: string) => `hostile_${label.replace(/\W+/g, '_')}`;

describe('insertForm unnest', () => {
  it('returns every hostile value byte for byte through one array parameter per column', async () => {
    await schema.pool.query(
      'CREATE TABLE hostile_unnest (id int PRIMARY KEY, v text, bytes bytea, doc jsonb)',
    );
    const adapter = postgresAdapter<Row>({
      pool: schema.pool,
      table: 'hostile_unnest',
      columns: [
        { name: 'id', type: 'int' },
        { name: 'v', type: 'text' },
        { name: 'bytes', type: 'bytea' },
        { name: 'doc', type: 'jsonb' },
      ],
      map: (r) => [r.id, r.v, r.bytes, r.doc],
      insertForm: 'unnest',
    });
    const sink = new Sink(adapter, { maxRecords: 1000, maxBytes: 64 << 20 });
    for (const r of rows) await sink.write(r);
    await sink.close();
    const back = await schema.pool.query<{ v: string | null; bytes: Buffer | null; doc: unknown }>(
      'SELECT v, bytes, doc FROM hostile_unnest ORDER BY id',
    );
    expect(back.rows.map((r) => r.v)).toEqual(rows.map((r) => r.v));
    expect(back.rows.map((r) => r.bytes?.toString('hex') ?? null)).toEqual(
      rows.map((r) => r.bytes?.toString('hex') ?? null),
    );
    expect(back.rows.map((r) => r.doc)).toEqual(rows.map((r) => r.doc));
  });
});

describe.each(MODES)('%s mode', (label, modeOptions) => {
  it('returns every hostile value byte for byte, NULL apart from the empty string', async () => {
    const table = tableFor(label);
    await schema.pool.query(
      `CREATE TABLE ${table} (id int PRIMARY KEY, v text, bytes bytea, tags text[], doc jsonb)`,
    );
    const adapter = postgresAdapter<Row>({
      pool: schema.pool,
      table,
      columns: ['id', 'v', 'bytes', 'tags', 'doc'],
      map: (r) => [r.id, r.v, r.bytes, r.tags, r.doc],
      ...modeOptions,
    });
    const sink = new Sink(adapter, { maxRecords: 1000, maxBytes: 64 << 20 });
    for (const r of rows) await sink.write(r);
    await sink.close();
    expect(sink.snapshot().written).toBe(rows.length);

    const back = await schema.pool.query<{
      id: number;
      v: string | null;
      bytes: Buffer | null;
      tags: (string | null)[] | null;
      doc: unknown;
      octets: number | null;
    }>(`SELECT id, v, bytes, tags, doc, octet_length(v) AS octets FROM ${table} ORDER BY id`);
    expect(back.rows).toHaveLength(rows.length);
    for (const [i, got] of back.rows.entries()) {
      const want = rows[i]!;
      expect(got.id).toBe(want.id);
      expect(got.v === null).toBe(want.v === null);
      // Compare as UTF-8 bytes, and let the server count the bytes it stored.
      expect(got.v === null ? null : Buffer.from(got.v, 'utf8').equals(Buffer.from(want.v!, 'utf8'))).toBe(
        want.v === null ? null : true,
      );
      expect(got.octets).toBe(want.v === null ? null : Buffer.byteLength(want.v, 'utf8'));
      expect(got.bytes === null ? null : got.bytes.equals(want.bytes!)).toBe(
        want.bytes === null ? null : true,
      );
      expect(got.tags).toEqual(want.tags);
      expect(got.doc).toEqual(want.doc);
    }
  });

  it('dead-letters a value with a NUL character as bad data (22021) and writes the rest', async () => {
    const table = `${tableFor(label)}_nul`;
    await schema.pool.query(
      `CREATE TABLE ${table} (id int PRIMARY KEY, v text, bytes bytea, tags text[], doc jsonb)`,
    );
    const letters: DeadLetter<Row>[] = [];
    const adapter = postgresAdapter<Row>({
      pool: schema.pool,
      table,
      columns: ['id', 'v', 'bytes', 'tags', 'doc'],
      map: (r) => [r.id, r.v, r.bytes, r.tags, r.doc],
      ...modeOptions,
    });
    const sink = new Sink(adapter, {
      maxRecords: 100,
      deadLetter: { write: async (l) => void letters.push(...l) },
    });
    for (let i = 0; i < 50; i++)
      await sink.write({
        id: i,
        v: i === 7 ? 'dock\u0000name' : `dock ${i}`,
        bytes: null,
        tags: null,
        doc: null,
      });
    await sink.close();
    expect(letters.map((l) => l.record.id)).toEqual([7]);
    // Source: PostgreSQL documentation, Appendix A: class 22 is data_exception; the server
    // answers 22021 (character_not_in_repertoire) for a NUL in text.
    expect(driverCodeOf(letters[0]!.error)).toBe('22021');
    const { rows: n } = await schema.pool.query<{ n: string }>(`SELECT count(*) AS n FROM ${table}`);
    expect(Number(n[0]!.n)).toBe(49);
  });
});
