// @spillway/postgres against the shared PostgreSQL server: every mode writes 100,000 rows that
// land exactly, the parameter limit, poison rows, a missing table, upsert idempotence, hostile
// identifiers, real server errors classified, and the size estimator against bytes on the wire.
import { createHash } from 'node:crypto';
import type { Socket } from 'node:net';
import {
  type DeadLetter,
  type DeadLetterTarget,
  driverCodeOf,
  Sink,
  SinkFailedError,
  StoreError,
} from '@spillway/core';
import {
  classifyPostgresError,
  MAX_PARAMETERS,
  type PostgresMode,
  postgresAdapter,
  postgresSink,
} from '@spillway/postgres';
import pg from 'pg';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { services, type TestSchema, withSchema } from '../harness/index.js';

/** A Tandem Bikes dock status row. */
interface DockStatus {
  id: number;
  dock: string;
  bikes: number;
  note: string | null;
}

const status = (id: number): DockStatus => ({
  id,
  dock: `dock-${String(id % 731).padStart(4, '0')}`,
  bikes: id % 23,
  note: id % 5 === 0 ? null : `checked by crew ${id % 17}`,
});
const columns = ['id', 'dock', 'bikes', 'note'];
const typedColumns = [
  { name: 'id', type: 'int' },
  { name: 'dock', type: 'text' },
  { name: 'bikes', type: 'int' },
  { name: 'note', type: 'text' },
];
const map = (s: DockStatus) => [s.id, s.dock, s.bikes, s.note];

/** The same rendering of a row in JavaScript and in SQL (below), hashed: a checksum over content. */
const rowText = (s: DockStatus) => `${s.id}|${s.dock}|${s.bikes}|${s.note ?? '~'}`;
function expectedChecksum(rows: readonly DockStatus[]): string {
  const sorted = [...rows].sort((a, b) => a.id - b.id);
  return createHash('md5').update(sorted.map(rowText).join('\n')).digest('hex');
}
async function tableChecksum(pool: pg.Pool, table: string): Promise<{ count: number; md5: string }> {
  const { rows } = await pool.query<{ count: string; md5: string | null }>(
    `SELECT count(*) AS count, md5(coalesce(string_agg(id || '|' || dock || '|' || bikes || '|' || coalesce(note, '~'), E'\\n' ORDER BY id), '')) AS md5 FROM ${pg.escapeIdentifier(table)}`,
  );
  return { count: Number(rows[0]!.count), md5: rows[0]!.md5 ?? '' };
}

function collectingDeadLetter<T>(): DeadLetterTarget<T> & { letters: DeadLetter<T>[] } {
  const letters: DeadLetter<T>[] = [];
  return {
    letters,
    async write(batch) {
      letters.push(...batch);
    },
  };
}

const modeOptions = (mode: PostgresMode) =>
  mode === 'upsert' ? { mode, conflict: { key: ['id'] } } : { mode };
const MODES: PostgresMode[] = ['insert', 'copy', 'upsert'];

let schema: TestSchema;
beforeAll(async () => {
  schema = await withSchema('pgsink');
});
afterAll(async () => {
  await schema?.drop();
});

async function createStatusTable(name: string, extra = ''): Promise<void> {
  await schema.pool.query(
    `CREATE TABLE ${pg.escapeIdentifier(name)} (id int PRIMARY KEY, dock text NOT NULL, bikes int NOT NULL, note text${extra})`,
  );
}

describe('each mode writes 100,000 rows that land exactly', () => {
  const N = 100_000;
  const records = Array.from({ length: N }, (_, i) => status(i + 1));

  it.each([
    ['insert', {}],
    ['insert', { insertForm: 'unnest', columns: typedColumns }],
    ['copy', { copyFormat: 'csv' }],
    ['copy', { copyFormat: 'text' }],
    ['upsert', { upsertViaCopyAbove: 1_000_000 }],
    ['upsert', { upsertViaCopyAbove: 1_000_000, insertForm: 'unnest', columns: typedColumns }],
    ['upsert', { upsertViaCopyAbove: 0 }],
  ] as const)('%s mode %j: count and checksum match what was written', async (mode, extra) => {
    const table = `bulk_${mode}_${
      Object.entries(extra)
        .filter(([k]) => k !== 'columns')
        .map(([, v]) => v)
        .join('') || 'default'
    }`
      .toLowerCase()
      .replace(/[^a-z0-9_]/g, '');
    await createStatusTable(table);
    const adapter = postgresAdapter<DockStatus>({
      pool: schema.pool,
      table,
      columns,
      map,
      ...modeOptions(mode),
      ...extra,
    });
    const sink = new Sink(adapter, { maxRecords: 1000 });
    for (const r of records) await sink.write(r);
    await sink.close();

    const snap = sink.snapshot();
    expect(snap.written).toBe(N);
    expect(snap.deadLettered).toBe(0);
    expect(adapter.stats().rows).toBe(N);
    expect(await tableChecksum(schema.pool, table)).toEqual({ count: N, md5: expectedChecksum(records) });
  });
});

describe('the 65,535-parameter limit of one statement', () => {
  const WIDTH = 10;
  const ROWS = 10_000; // 100,000 parameters in one batch
  const wideColumns = Array.from({ length: WIDTH }, (_, i) => `c${i}`);

  it('is real: pg sends 65,536 parameters and the server refuses the statement with 08P01', async () => {
    // Source: PostgreSQL Frontend/Backend Protocol, "Bind" message: the parameter count is an
    // Int16, so 65,536 wraps to 0 and the server sees a mismatch.
    const placeholders = Array.from({ length: MAX_PARAMETERS + 1 }, (_, i) => `($${i + 1}::int)`).join(',');
    const error = await schema.pool
      .query(
        `SELECT count(*) FROM (VALUES ${placeholders}) v(x)`,
        Array.from({ length: MAX_PARAMETERS + 1 }, (_, i) => i),
      )
      .then(
        () => undefined,
        (e: unknown) => e,
      );
    expect(driverCodeOf(error)).toBe('08P01');
    // Sending it again cannot help: the adapter never retries it.
    expect(classifyPostgresError(error)).toBe('fatal');
  });

  it.each(['insert', 'upsert'] as const)(
    '%s mode splits a batch of rows × columns > 65,535 into statements that land whole',
    async (mode) => {
      const table = `wide_${mode}`;
      await schema.pool.query(
        `CREATE TABLE ${table} (${wideColumns.map((c) => `${c} int`).join(', ')}, PRIMARY KEY (c0))`,
      );
      const adapter = postgresAdapter<number>({
        pool: schema.pool,
        table,
        columns: wideColumns,
        map: (i) => wideColumns.map((_, c) => i * WIDTH + c),
        ...(mode === 'upsert'
          ? { mode, conflict: { key: ['c0'] }, upsertViaCopyAbove: Number.POSITIVE_INFINITY }
          : { mode }),
      });
      const sink = new Sink(adapter, { maxRecords: ROWS, maxBytes: 64 << 20 });
      for (let i = 0; i < ROWS; i++) await sink.write(i);
      await sink.close();

      const stats = adapter.stats();
      expect(stats.writes).toBe(1); // one batch, no retry, no split
      expect(stats.maxParameters).toBeLessThanOrEqual(MAX_PARAMETERS);
      expect(stats.dataStatements).toBe(
        Math.ceil((ROWS * WIDTH) / (Math.floor(MAX_PARAMETERS / WIDTH) * WIDTH)),
      ); // 2
      const { rows } = await schema.pool.query<{ n: string; s: string }>(
        `SELECT count(*) AS n, sum(${wideColumns.join(' + ')}::bigint) AS s FROM ${table}`,
      );
      const cells = ROWS * WIDTH;
      expect(Number(rows[0]!.n)).toBe(ROWS);
      expect(Number(rows[0]!.s)).toBe((cells * (cells - 1)) / 2); // every cell value 0 … cells-1 exactly once
    },
  );

  it('insertForm unnest binds one array per column, so the same batch is one statement of 10 parameters', async () => {
    await schema.pool.query(`CREATE TABLE wide_unnest (${wideColumns.map((c) => `${c} int`).join(', ')})`);
    const adapter = postgresAdapter<number>({
      pool: schema.pool,
      table: 'wide_unnest',
      columns: wideColumns.map((name) => ({ name, type: 'int' })),
      map: (i) => wideColumns.map((_, c) => i * WIDTH + c),
      insertForm: 'unnest',
    });
    const sink = new Sink(adapter, { maxRecords: ROWS, maxBytes: 64 << 20 });
    for (let i = 0; i < ROWS; i++) await sink.write(i);
    await sink.close();
    expect(adapter.stats()).toMatchObject({ writes: 1, dataStatements: 1, maxParameters: WIDTH, rows: ROWS });
    const { rows } = await schema.pool.query<{ n: string; s: string }>(
      `SELECT count(*) AS n, sum(${wideColumns.join(' + ')}::bigint) AS s FROM wide_unnest`,
    );
    const cells = ROWS * WIDTH;
    expect([Number(rows[0]!.n), Number(rows[0]!.s)]).toEqual([ROWS, (cells * (cells - 1)) / 2]);
  });
});

describe('poison rows', () => {
  const N = 20_000;
  const K = 5;
  const poison = new Set([17, 4_321, 9_999, 15_000, 19_998]);

  it.each([...MODES, 'insert-unnest'] as const)(
    '%s mode: 5 rows that violate a CHECK among 20,000 are dead-lettered with 23514 and the constraint; the rest land',
    async (variant) => {
      const mode = variant === 'insert-unnest' ? 'insert' : variant;
      const unnest =
        variant === 'insert-unnest' ? { insertForm: 'unnest' as const, columns: typedColumns } : {};
      const table = `poison_${variant.replace('-', '_')}`;
      await createStatusTable(table, ', CONSTRAINT bikes_nonnegative CHECK (bikes >= 0)');
      const records = Array.from({ length: N }, (_, i) => ({
        ...status(i + 1),
        bikes: poison.has(i + 1) ? -1 : (i + 1) % 23,
      }));
      const deadLetter = collectingDeadLetter<DockStatus>();
      const adapter = postgresAdapter<DockStatus>({
        pool: schema.pool,
        table,
        columns,
        map,
        ...modeOptions(mode),
        upsertViaCopyAbove: mode === 'upsert' ? 1000 : undefined,
        ...unnest,
      });
      const sink = new Sink(adapter, { maxRecords: N, maxBytes: 64 << 20, deadLetter });
      for (const r of records) await sink.write(r);
      await sink.close();

      const { rows } = await schema.pool.query<{ n: string }>(`SELECT count(*) AS n FROM ${table}`);
      expect(Number(rows[0]!.n)).toBe(N - K);
      expect(deadLetter.letters.map((l) => l.record.id).sort((a, b) => a - b)).toEqual(
        [...poison].sort((a, b) => a - b),
      );
      for (const letter of deadLetter.letters) {
        expect(letter.reason).toBe('rejected');
        expect(letter.error).toBeInstanceOf(StoreError);
        // Source: PostgreSQL documentation, Appendix A: 23514 is check_violation.
        expect(driverCodeOf(letter.error)).toBe('23514');
        expect((letter.error as StoreError).details.constraint).toBe('bikes_nonnegative');
        expect(((letter.error as StoreError).cause as { code?: string }).code).toBe('23514');
      }
      // Bisection: each poison row costs about two writes per halving, never one write per row.
      const writes = adapter.stats().writes;
      const bound = 1 + 2 * K * Math.ceil(Math.log2(N));
      console.log(
        `[postgres] poison ${variant}: ${writes} writes for ${K} bad rows in ${N} (bound ${bound})`,
      );
      expect(writes).toBeLessThanOrEqual(bound);
    },
  );
});

describe('a missing table', () => {
  it.each(MODES)(
    '%s mode: the sink fails with an error naming the table, and nothing is reported durable',
    async (mode) => {
      const deadLetter = collectingDeadLetter<DockStatus>();
      const sink = postgresSink<DockStatus>({
        pool: schema.pool,
        schema: schema.schema,
        table: 'no_such_dock_table',
        columns,
        map,
        ...modeOptions(mode),
        deadLetter,
      });
      let durable = 0;
      sink.on('settled', (e) => {
        if (e.outcome === 'durable') durable += e.metas.length;
      });
      for (let i = 1; i <= 50; i++) await sink.write(status(i));
      const error = await sink.flush().then(
        () => undefined,
        (e: unknown) => e,
      );
      expect(error).toBeInstanceOf(SinkFailedError);
      expect(sink.state).toBe('failed');
      const cause = (error as SinkFailedError).cause as StoreError;
      expect(cause).toBeInstanceOf(StoreError);
      expect(cause.driverCode).toBe('42P01');
      expect(cause.message).toContain(`"${schema.schema}"."no_such_dock_table"`);
      expect((cause.cause as { code?: string }).code).toBe('42P01');
      expect(durable).toBe(0);
      expect(sink.snapshot().written).toBe(0);
      expect(deadLetter.letters).toHaveLength(0);
      await expect(sink.write(status(51))).rejects.toBeInstanceOf(SinkFailedError);
    },
  );

  it('a missing column is fatal too, and names the column', async () => {
    await createStatusTable('no_column');
    const sink = postgresSink<DockStatus>({
      pool: schema.pool,
      table: 'no_column',
      columns: ['id', 'dock', 'bikes', 'remark'],
      map,
    });
    await sink.write(status(1));
    const error = (await sink.flush().catch((e: unknown) => e)) as SinkFailedError;
    expect(driverCodeOf(error)).toBe('42703');
    expect(error.message).toContain('remark');
  });
});

describe('upsert', () => {
  const N = 100_000;
  const records = Array.from({ length: N }, (_, i) => status(i + 1));

  it.each([
    ['values', 1_000_000],
    ['staging table', 0],
  ] as const)(
    'replaying the same 100,000 records through %s leaves the table unchanged; changed records update it',
    async (_path, upsertViaCopyAbove) => {
      const table = `replay_${upsertViaCopyAbove === 0 ? 'stage' : 'values'}`;
      await createStatusTable(table);
      const write = async (rows: readonly DockStatus[]) => {
        const sink = postgresSink<DockStatus>({
          pool: schema.pool,
          table,
          columns,
          map,
          mode: 'upsert',
          conflict: { key: ['id'] },
          upsertViaCopyAbove,
          maxRecords: 2000,
        });
        for (const r of rows) await sink.write(r);
        await sink.close();
        expect(sink.snapshot().written).toBe(rows.length);
      };
      await write(records);
      const first = await tableChecksum(schema.pool, table);
      expect(first).toEqual({ count: N, md5: expectedChecksum(records) });

      await write(records);
      expect(await tableChecksum(schema.pool, table)).toEqual(first);

      // The replay was not a no-op by accident: changed values do replace the stored ones.
      const changed = records.map((r) => ({ ...r, bikes: r.bikes + 100 }));
      await write(changed);
      expect(await tableChecksum(schema.pool, table)).toEqual({ count: N, md5: expectedChecksum(changed) });
    },
  );

  it.each([1_000_000, 0])(
    'applies several records of one key in one batch in order, as writing them one by one would (upsertViaCopyAbove %s)',
    async (upsertViaCopyAbove) => {
      const table = `same_key_${upsertViaCopyAbove === 0 ? 'stage' : 'values'}`;
      await createStatusTable(table);
      const adapter = postgresAdapter<DockStatus>({
        pool: schema.pool,
        table,
        columns,
        map,
        mode: 'upsert',
        conflict: { key: ['id'], update: ['bikes'] },
        upsertViaCopyAbove,
      });
      const sink = new Sink(adapter, { maxRecords: 100 });
      // id 1 three times: inserted with the first note, then only `bikes` updated twice.
      for (const r of [
        { id: 1, dock: 'dock-A', bikes: 1, note: 'first' },
        { id: 2, dock: 'dock-B', bikes: 5, note: null },
        { id: 1, dock: 'dock-X', bikes: 2, note: 'second' },
        { id: 1, dock: 'dock-Y', bikes: 3, note: 'third' },
      ]) {
        await sink.write(r);
      }
      await sink.close();
      expect(adapter.stats().writes).toBe(1);
      const { rows } = await schema.pool.query(`SELECT id, dock, bikes, note FROM ${table} ORDER BY id`);
      expect(rows).toEqual([
        { id: 1, dock: 'dock-A', bikes: 3, note: 'first' },
        { id: 2, dock: 'dock-B', bikes: 5, note: null },
      ]);
    },
  );

  it('with DO NOTHING keeps the rows that were there', async () => {
    await createStatusTable('keep_first');
    await schema.pool.query(`INSERT INTO keep_first VALUES (1, 'dock-old', 9, 'kept')`);
    const sink = postgresSink<DockStatus>({
      pool: schema.pool,
      table: 'keep_first',
      columns,
      map,
      mode: 'upsert',
      conflict: { key: ['id'], action: 'nothing' },
    });
    await sink.write({ id: 1, dock: 'dock-new', bikes: 0, note: 'dropped' });
    await sink.write({ id: 2, dock: 'dock-2', bikes: 2, note: null });
    await sink.close();
    const { rows } = await schema.pool.query('SELECT id, dock, bikes, note FROM keep_first ORDER BY id');
    expect(rows).toEqual([
      { id: 1, dock: 'dock-old', bikes: 9, note: 'kept' },
      { id: 2, dock: 'dock-2', bikes: 2, note: null },
    ]);
  });
});

describe('hostile table and column names', () => {
  const table = 'dock"; DROP TABLE victim; --';
  const hostileColumns = ['id', 'bikes "count"; --', 'note); DELETE FROM victim; --', 'Mixed Case'];

  beforeAll(async () => {
    await schema.pool.query('CREATE TABLE victim (x int)');
    await schema.pool.query('INSERT INTO victim VALUES (1)');
  });

  it.each([
    ['insert', { mode: 'insert' }],
    ['copy csv', { mode: 'copy', copyFormat: 'csv' }],
    ['copy text', { mode: 'copy', copyFormat: 'text' }],
    [
      'upsert values',
      {
        mode: 'upsert',
        conflict: { key: ['bikes "count"; --'] },
        upsertViaCopyAbove: Number.POSITIVE_INFINITY,
      },
    ],
    ['upsert staging', { mode: 'upsert', conflict: { key: ['bikes "count"; --'] }, upsertViaCopyAbove: 0 }],
  ] as const)('%s: are taken literally and cannot inject SQL', async (label, extra) => {
    const name = `${table} ${label}`;
    // pg's own escapeIdentifier makes the table, independently of the adapter's quoting.
    await schema.pool.query(
      `CREATE TABLE ${pg.escapeIdentifier(name)} (${hostileColumns.map((c) => `${pg.escapeIdentifier(c)} ${c === 'id' ? 'serial' : c.startsWith('bikes') ? 'int UNIQUE' : 'text'}`).join(', ')})`,
    );
    const sink = postgresSink<number>({
      pool: schema.pool,
      schema: schema.schema,
      table: name,
      columns: hostileColumns.slice(1),
      map: (i) => [i, `note ${i}`, `M${i}`],
      ...extra,
    });
    for (let i = 0; i < 300; i++) await sink.write(i);
    await sink.close();
    const { rows } = await schema.pool.query(
      `SELECT count(*)::int AS n, sum(${pg.escapeIdentifier(hostileColumns[1]!)})::int AS s FROM ${pg.escapeIdentifier(name)}`,
    );
    expect(rows[0]).toEqual({ n: 300, s: (299 * 300) / 2 });
    const victim = await schema.pool.query('SELECT x FROM victim');
    expect(victim.rows).toEqual([{ x: 1 }]);
  });
});

describe('errors from a real server are classified as the README says', () => {
  // Source: PostgreSQL documentation, Appendix A "PostgreSQL Error Codes".
  const errorOf = (p: Promise<unknown>) =>
    p.then(
      () => {
        throw new Error('expected the server to refuse');
      },
      (e: unknown) => e,
    );

  it('data and integrity errors split; missing objects are fatal', async () => {
    await createStatusTable('errors', ', CONSTRAINT bikes_nonnegative CHECK (bikes >= 0)');
    const cases: Array<[string, () => Promise<unknown>, string, string]> = [
      ['check', () => schema.pool.query(`INSERT INTO errors VALUES (1, 'd', -1, null)`), '23514', 'split'],
      ['not null', () => schema.pool.query(`INSERT INTO errors VALUES (2, null, 1, null)`), '23502', 'split'],
      [
        'bad integer',
        () => schema.pool.query(`INSERT INTO errors VALUES ($1, 'd', 1, null)`, ['seven']),
        '22P02',
        'split',
      ],
      [
        'NUL in text',
        () => schema.pool.query(`INSERT INTO errors VALUES (3, $1, 1, null)`, ['a\u0000b']),
        '22021',
        'split',
      ],
      ['missing table', () => schema.pool.query('SELECT * FROM no_such_table'), '42P01', 'fatal'],
      ['missing column', () => schema.pool.query('SELECT no_such_column FROM errors'), '42703', 'fatal'],
    ];
    for (const [label, query, code, cls] of cases) {
      const error = await errorOf(query());
      expect({ label, code: driverCodeOf(error), cls: classifyPostgresError(error) }).toEqual({
        label,
        code,
        cls,
      });
    }
  });

  it('unknown database and unknown role are fatal', async () => {
    const url = new URL(services().pgUrl);
    const connectError = async (patch: (u: URL) => void) => {
      const u = new URL(url);
      patch(u);
      const c = new pg.Client({ connectionString: u.toString() });
      c.on('error', () => undefined);
      return errorOf(c.connect());
    };
    const noDb = await connectError((u) => {
      u.pathname = '/no_such_database_spillway';
    });
    expect([driverCodeOf(noDb), classifyPostgresError(noDb)]).toEqual(['3D000', 'fatal']);
    const noRole = await connectError((u) => {
      u.username = 'no_such_role_spillway';
    });
    expect(driverCodeOf(noRole)?.slice(0, 2)).toBe('28');
    expect(classifyPostgresError(noRole)).toBe('fatal');
  });

  it('a serialization failure and a deadlock are retried', async () => {
    await schema.pool.query('CREATE TABLE contended (id int PRIMARY KEY, v int)');
    await schema.pool.query('INSERT INTO contended VALUES (1, 0), (2, 0)');
    const a = await schema.pool.connect();
    const b = await schema.pool.connect();
    try {
      // Serialization failure: both read, both write what the other read.
      await a.query('BEGIN ISOLATION LEVEL SERIALIZABLE');
      await b.query('BEGIN ISOLATION LEVEL SERIALIZABLE');
      await a.query('SELECT sum(v) FROM contended');
      await b.query('SELECT sum(v) FROM contended');
      await a.query('UPDATE contended SET v = 1 WHERE id = 1');
      await b.query('UPDATE contended SET v = 1 WHERE id = 2');
      await a.query('COMMIT');
      const serialization = await errorOf(b.query('COMMIT'));
      expect([driverCodeOf(serialization), classifyPostgresError(serialization)]).toEqual(['40001', 'retry']);
      await b.query('ROLLBACK');

      // Deadlock: each holds the row the other wants.
      await a.query('BEGIN');
      await b.query('BEGIN');
      await a.query('UPDATE contended SET v = 2 WHERE id = 1');
      await b.query('UPDATE contended SET v = 2 WHERE id = 2');
      const first = a.query('UPDATE contended SET v = 3 WHERE id = 2').then(
        () => undefined,
        (e: unknown) => e,
      );
      const second = b.query('UPDATE contended SET v = 3 WHERE id = 1').then(
        () => undefined,
        (e: unknown) => e,
      );
      const [ea, eb] = await Promise.all([first, second]);
      const deadlock = ea ?? eb;
      expect([driverCodeOf(deadlock), classifyPostgresError(deadlock)]).toEqual(['40P01', 'retry']);
      await a.query('ROLLBACK');
      await b.query('ROLLBACK');
    } finally {
      a.release();
      b.release();
    }
  });

  it('a connection terminated by the server (57P01) is absorbed: no crash, the next batch lands', async () => {
    await createStatusTable('terminated');
    const pool = new pg.Pool({ ...schema.clientConfig, max: 1 });
    // No pool 'error' listener of our own here: the adapter must provide the one that keeps the process alive.
    const adapter = postgresAdapter<DockStatus>({ pool, table: 'terminated', columns, map });
    const sink = new Sink(adapter, { retry: { baseDelayMs: 10 } });
    try {
      await sink.write(status(1));
      await sink.flush();
      const { rows } = await schema.pool.query<{ n: number }>(
        `SELECT pg_terminate_backend(pid)::int AS n FROM pg_stat_activity WHERE pid <> pg_backend_pid() AND datname = current_database() AND query LIKE 'INSERT INTO "terminated"%'`,
      );
      expect(rows[0]?.n).toBe(1);
      await new Promise((r) => setTimeout(r, 200));
      await sink.write(status(2));
      await sink.flush();
      expect(adapter.stats().poolErrors).toBeGreaterThanOrEqual(1);
      const count = await schema.pool.query<{ n: string }>('SELECT count(*) AS n FROM terminated');
      expect(Number(count.rows[0]!.n)).toBe(2);
      await sink.close();
    } finally {
      await pool.end();
    }
  });
});

describe('when map runs', () => {
  // README, "PostgreSQL": every mode maps a record when its batch is written (at accept only to size
  // it), so a record changed before its batch leaves lands as it is then.
  it.each(MODES)(
    '%s: a record changed after write() and before its batch leaves lands changed',
    async (mode) => {
      const table = `changed_late_${mode}`;
      await createStatusTable(table);
      const adapter = postgresAdapter<DockStatus>({
        pool: schema.pool,
        table,
        columns,
        map,
        ...modeOptions(mode),
      });
      const sink = new Sink(adapter, { maxRecords: 100, maxAgeMs: 60_000, idleMs: 0 });
      const records = Array.from({ length: 10 }, (_, i) => status(i + 1));
      for (const r of records) await sink.write(r);
      expect(adapter.stats().writes).toBe(0);
      for (const r of records) r.bikes = 99;
      await sink.close();
      expect(adapter.stats().writes).toBe(1);
      expect(await tableChecksum(schema.pool, table)).toEqual({ count: 10, md5: expectedChecksum(records) });
      const { rows } = await schema.pool.query(`SELECT DISTINCT bikes FROM ${table}`);
      expect(rows).toEqual([{ bikes: 99 }]);
    },
  );
});

describe('the size estimator', () => {
  it.each([
    ['insert', {}],
    ['copy', { copyFormat: 'csv' }],
    ['copy', { copyFormat: 'text' }],
  ] as const)(
    '%s %j: estimates add up to within 15 percent of the bytes the client wrote to its socket',
    async (mode, extra) => {
      const table = `sized_${mode}_${Object.values(extra).join('')}`;
      await createStatusTable(table);
      const pool = new pg.Pool({ ...schema.clientConfig, max: 1 });
      pool.on('error', () => undefined);
      const sockets: Socket[] = [];
      pool.on('connect', (client) =>
        sockets.push((client as unknown as { connection: { stream: Socket } }).connection.stream),
      );
      const sent = () => sockets.reduce((n, s) => n + s.bytesWritten, 0);
      try {
        await pool.query('SELECT 1'); // the connection handshake is not part of a write
        const adapter = postgresAdapter<DockStatus>({ pool, table, columns, map, mode, ...extra });
        const sink = new Sink(adapter, { maxRecords: 1000 });
        // Longer, non-ASCII notes, so that the estimate has to count UTF-8 bytes.
        const records = Array.from({ length: 10_000 }, (_, i) => ({
          ...status(i + 1),
          note: `Störung an Säule ${i} – 🚲 ${'x'.repeat(i % 50)}`,
        }));
        const before = sent();
        let estimated = 0;
        for (const r of records) {
          estimated += adapter.estimateBytes(r);
          await sink.write(r);
        }
        await sink.close();
        const actual = sent() - before;
        console.log(
          `[postgres] estimator ${mode} ${JSON.stringify(extra)}: estimated ${estimated} B, socket ${actual} B, ratio ${(estimated / actual).toFixed(3)}`,
        );
        expect(estimated / actual).toBeGreaterThan(0.85);
        expect(estimated / actual).toBeLessThan(1.15);
      } finally {
        await pool.end();
      }
    },
  );
});

describe('COPY data leaves with its statement', () => {
  // The adapter sends CopyData right after the COPY statement instead of waiting for the server's
  // CopyInResponse. Source: PostgreSQL documentation, Frontend/Backend Protocol, "COPY Operations":
  // after an error "any subsequent CopyData, CopyDone, or CopyFail messages issued by the frontend
  // will simply be dropped". One connection (max: 1) serves every statement below, so a leftover
  // message of a failed COPY would show up as a broken next statement.
  it('a COPY refused at its start or midway leaves the connection in order for the next batch', async () => {
    const one = await withSchema('copyeager', { max: 1 });
    const pool = one.pool;
    try {
      await pool.query(
        'CREATE TABLE copy_eager (id int PRIMARY KEY, dock text NOT NULL, bikes int NOT NULL, note text, CONSTRAINT bikes_below_20 CHECK (bikes < 20))',
      );
      const long = 'Tandem Bikes dock audit '.repeat(40);
      // ~1 KB a row: 5,000 rows are many 64 Ki-character chunks, all sent before any answer.
      const rows = (from: number, n: number) =>
        Array.from({ length: n }, (_, i) => ({ ...status(from + i), bikes: (from + i) % 20, note: long }));
      const into = (table: string) =>
        postgresAdapter<DockStatus>({ pool, table, columns, map, mode: 'copy' });
      const batch = (records: DockStatus[]) => ({
        id: 1,
        reason: 'manual' as const,
        attempt: 1,
        records,
        metas: records.map(() => undefined),
        bytes: 0,
      });

      // Refused at its start: the table does not exist.
      const missing = await into('copy_eager_missing')
        .write(batch(rows(1, 5_000)))
        .catch((e: unknown) => e);
      expect(driverCodeOf(missing)).toBe('42P01');
      // Refused midway: row 4,000 of 5,000 violates the CHECK, after the server read many chunks.
      const bad = rows(1, 5_000);
      bad[3_999] = { ...bad[3_999]!, bikes: 25 };
      const midway = await into('copy_eager')
        .write(batch(bad))
        .catch((e: unknown) => e);
      expect(driverCodeOf(midway)).toBe('23514');
      expect((await pool.query('SELECT count(*)::int AS n FROM copy_eager')).rows[0].n).toBe(0);

      // The same connection then takes a clean multi-chunk COPY and an ordinary query.
      const adapter = into('copy_eager');
      const good = rows(1, 5_000);
      await adapter.write(batch(good));
      expect(adapter.stats().copyBytes).toBeGreaterThan(4 * 65_536);
      const { rows: landed } = await pool.query<{ n: number; notes: number }>(
        'SELECT count(*)::int AS n, count(*) FILTER (WHERE note = $1)::int AS notes FROM copy_eager',
        [long],
      );
      expect(landed[0]).toEqual({ n: 5_000, notes: 5_000 });
      expect((await pool.query('SELECT 1 + 1 AS two')).rows[0].two).toBe(2);
    } finally {
      await one.drop();
    }
  });
});
