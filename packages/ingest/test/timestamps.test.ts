// `timestamp` columns: validated against RFC 3339 without a JS Date, the text kept as sent.
import { Readable } from 'node:stream';
import { Sink } from '@spillway/core';
import { describe, expect, it } from 'vitest';
import { isTimestamp, isTimestampAt, timestamp } from '../src/columns.js';
import { ingest, type Reject, type Row } from '../src/index.js';
import { MemoryAdapter } from './memory-adapter.js';

async function read(values: string[], column: { min?: number; max?: number } = {}) {
  const adapter = new MemoryAdapter<Row>();
  const sink = new Sink(adapter);
  const rejects: Reject[] = [];
  const csv = `at\n${values.join('\n')}\n`;
  await ingest(Readable.from([csv]), sink, {
    format: 'csv',
    columns: [{ name: 'at', type: 'timestamp', ...column }],
    rejects: { write: (r) => void rejects.push(r) },
  });
  await sink.close();
  return {
    landed: adapter.stored.map((r) => r.at),
    rejected: rejects.map((r) => [values[r.line - 2], r.reason, r.message]),
  };
}

describe('timestamp columns', () => {
  it('accepts the examples of RFC 3339 section 5.8 and keeps their text exactly, every digit', async () => {
    // Source: RFC 3339, section 5.8 "Examples" (the leap second ones included).
    const examples = [
      '1985-04-12T23:20:50.52Z',
      '1996-12-19T16:39:57-08:00',
      '1990-12-31T23:59:60Z',
      '1990-12-31T15:59:60-08:00',
      '1937-01-01T12:00:27.87+00:20',
    ];
    const { landed, rejected } = await read(examples);
    expect(rejected).toEqual([]);
    expect(landed).toEqual(examples);
  });

  it('keeps microseconds: 2024-05-01T10:00:00.123456Z lands as sent, not through a millisecond Date', async () => {
    const { landed } = await read(['2024-05-01T10:00:00.123456Z', '2024-05-01T10:00:00.000001+02:00']);
    expect(landed).toEqual(['2024-05-01T10:00:00.123456Z', '2024-05-01T10:00:00.000001+02:00']);
  });

  it('accepts the lower-case t and z and the space separator that RFC 3339 section 5.6 allows', async () => {
    const forms = ['2024-05-01t10:00:00z', '2024-05-01 10:00:00Z', '2024-05-01T10:00:00-00:00'];
    const { landed, rejected } = await read(forms);
    expect(rejected).toEqual([]);
    expect(landed).toEqual(forms);
  });

  it('writes a date alone out as its UTC midnight, so that no store reads it in its own time zone', async () => {
    const { landed } = await read(['2024-05-01', '2024-02-29']);
    expect(landed).toEqual(['2024-05-01T00:00:00Z', '2024-02-29T00:00:00Z']);
  });

  it('rejects what is not RFC 3339 as type: no offset, bad calendar days, a leap second off 23:59:60 UTC', async () => {
    const bad = [
      '2024-05-01T10:00:00', // RFC 3339 requires an offset: no guessing the zone
      '2024-05-01T10:00Z', // seconds are required
      '2023-02-29T10:00:00Z', // not a leap year
      '2024-04-31', // April has 30 days
      '2024-05-01T24:00:00Z',
      '2024-05-01T10:00:00+24:00', // RFC 3339 section 5.7: offset hour 00-23
      '2024-06-30T12:00:60Z', // a leap second only at 23:59:60 UTC (RFC 3339 section 5.7)
      '2024-06-29T23:59:60Z', // ... on the last day of a month
      '1990-12-31T23:59:60-08:00', // 07:59:60 UTC on the next day
      '2024-05-01T10:00:00.Z',
    ];
    const { landed, rejected } = await read(bad);
    expect(landed).toEqual([]);
    expect(rejected.map((r) => [r[0], r[1]])).toEqual(bad.map((b) => [b, 'type']));
  });

  it('rejects valid RFC 3339 text that PostgreSQL cannot hold exactly as range, naming why', async () => {
    const { landed, rejected } = await read([
      '2024-05-01T10:00:00.1234567Z', // timestamptz keeps microseconds and would round this
      '0000-01-01T00:00:00Z', // PostgreSQL has no year 0 (checked on PostgreSQL 15)
      '2024-05-01T10:00:00+16:00', // PostgreSQL refuses displacements past ±15:59 (checked on 15)
      '2024-05-01T10:00:00.1234560000Z', // extra zeros change nothing: accepted
    ]);
    expect(landed).toEqual(['2024-05-01T10:00:00.1234560000Z']);
    expect(rejected).toEqual([
      ['2024-05-01T10:00:00.1234567Z', 'range', expect.stringMatching(/microseconds/)],
      ['0000-01-01T00:00:00Z', 'range', expect.stringMatching(/year 0000/)],
      ['2024-05-01T10:00:00+16:00', 'range', expect.stringMatching(/15:59/)],
    ]);
  });

  it('compares min and max as epoch milliseconds of the instant, sub-millisecond digits included', async () => {
    const max = Date.UTC(2024, 4, 1, 10, 0, 0, 123);
    const { landed, rejected } = await read(
      [
        '2024-05-01T10:00:00.123Z',
        '2024-05-01T10:00:00.123001Z',
        '2024-05-01T12:00:00.123+02:00',
        '0099-01-01',
      ],
      { max, min: Date.UTC(2000, 0, 1) },
    );
    expect(landed).toEqual(['2024-05-01T10:00:00.123Z', '2024-05-01T12:00:00.123+02:00']);
    expect(rejected.map((r) => [r[0], r[1]])).toEqual([
      ['2024-05-01T10:00:00.123001Z', 'range'],
      ['0099-01-01', 'range'],
    ]);
  });

  it('reads exactly the forms of the RFC 3339 grammar, checked against it as a regular expression', () => {
    // Source: RFC 3339, section 5.6 "Internet Date/Time Format" (with its note's "t", "z" and
    // space), written as a regular expression here and read by hand in `timestamp()`.
    const grammar =
      /^(\d{4})-(\d{2})-(\d{2})(?:[Tt ](\d{2}):(\d{2}):(\d{2})(?:\.(\d+))?(?:[Zz]|([+-])(\d{2}):(\d{2})))?$/;
    // Valid stamps, then each mutated one character at a time (seeded, so the run repeats).
    const seeds = [
      '2024-05-01',
      '2024-05-01T10:00:00Z',
      '2024-05-01t10:00:00.123456z',
      '2024-05-01 10:00:00.5+02:00',
      '1985-04-12T23:20:50.52-08:30',
    ];
    const alphabet = '0123456789-:.+Tt Zz5x';
    let seed = 42;
    const random = (n: number) => {
      seed = (seed * 1_103_515_245 + 12_345) % 2_147_483_648;
      return seed % n;
    };
    let checked = 0;
    for (let k = 0; k < 20_000; k++) {
      let s = seeds[random(seeds.length)]!;
      for (let edits = random(3); edits > 0; edits--) {
        const at = random(s.length + 1);
        const op = random(3);
        const c = alphabet[random(alphabet.length)]!;
        s =
          op === 0
            ? s.slice(0, at) + c + s.slice(at + 1)
            : op === 1
              ? s.slice(0, at) + c + s.slice(at)
              : s.slice(0, at) + s.slice(at + 1);
      }
      const read = timestamp(s);
      const form = read !== 'form';
      expect([s, form]).toEqual([s, grammar.test(s)]);
      // The check without the instant (columns without min/max) agrees with the full read.
      expect([s, isTimestamp(s)]).toEqual([s, typeof read !== 'string']);
      // And on bytes inside a record, with digits around it that a read past its end would take.
      const inRecord = Buffer.from(`12${s}00:00`, 'latin1');
      expect([s, isTimestampAt(inRecord, 2, 2 + s.length)]).toEqual([s, typeof read !== 'string']);
      checked++;
    }
    expect(checked).toBe(20_000);
  });
});
