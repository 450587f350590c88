import pg from 'pg';
import { afterAll, describe, expect, it } from 'vitest';
import { postgresAdapter } from '../src/adapter.js';
import { copyLine } from '../src/copy-format.js';
import { insertRowBytes } from '../src/size.js';
import { toWire } from '../src/values.js';

const pool = new pg.Pool({ connectionString: 'postgres://127.0.0.1:1/none' });
afterAll(() => pool.end());

type Row = readonly unknown[];
// Values without characters that COPY escapes (the estimator leaves escapes out on purpose).
const rows: Row[] = [
  [1, 'dock-0001', 12, null, true],
  [-42, 'Zürich Straße', 0, 'ü', false],
  [2 ** 40, '東京駅', 3.25, '🚲🛴', null],
  [9_007_199_254_740_993n, '', -0.5, 'x'.repeat(500), true],
  [7, new Date(0), Buffer.from([1, 2, 3]), ['a', null], { dock: 'D-1' }],
];
const map = (r: Row) => r;
const columns = ['a', 'b', 'c', 'd', 'e'];

describe('the size estimator', () => {
  it.each(['csv', 'text'] as const)(
    'counts exactly the COPY %s bytes of rows without escaped characters',
    (copyFormat) => {
      const adapter = postgresAdapter<Row>({ pool, table: 't', columns, map, mode: 'copy', copyFormat });
      for (const r of rows)
        expect(adapter.estimateBytes(r)).toBe(Buffer.byteLength(copyLine(r, copyFormat), 'utf8'));
    },
  );

  it('counts the digits and sign of integers of every width, as COPY writes them', () => {
    const adapter = postgresAdapter<Row>({ pool, table: 't', columns, map, mode: 'copy' });
    for (let digits = 1; digits <= 16; digits++) {
      for (const v of [10 ** (digits - 1), 10 ** digits - 1, -(10 ** (digits - 1)), -(10 ** digits - 1)]) {
        const r: Row = [v, 0, -v, null, v];
        expect(adapter.estimateBytes(r)).toBe(Buffer.byteLength(copyLine(r, 'csv'), 'utf8'));
      }
    }
  });

  it('counts the parameter bytes and placeholder text of an INSERT row', () => {
    const adapter = postgresAdapter<Row>({ pool, table: 't', columns, map });
    for (const r of rows) expect(adapter.estimateBytes(r)).toBe(insertRowBytes(r.map(toWire)));
  });

  it('gives an unmappable record a small fixed weight instead of throwing', () => {
    const adapter = postgresAdapter<Row>({
      pool,
      table: 't',
      columns,
      map: () => {
        throw new Error('bad');
      },
    });
    expect(adapter.estimateBytes([])).toBe(64);
  });
});
