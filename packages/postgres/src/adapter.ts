import {
  type Batch,
  type ErrorClass,
  messageOf,
  type PartialWrite,
  Sink,
  type SinkAdapter,
  type SinkOptions,
  SpillwayError,
  StoreError,
} from '@spillway/core';
import {
  invalidOption,
  kafkaCoordinates,
  partitionKey,
  repeatedSourceMessages,
  type StoredOffsets,
} from '@spillway/core/kit';
import type { PoolClient } from 'pg';
import { classifyPostgresError, isConnectionError, sqlstateOf } from './classify.js';
import { CopyChunks } from './copy-format.js';
import { CopyIn } from './copy-in.js';
import { allStored, OffsetLedger, type Ranges, rangesOf, stopAtRefused } from './offsets.js';
import {
  ADAPTER_OPTION_NAMES,
  type PostgresAdapterOptions,
  type ResolvedPostgresOptions,
  resolvePostgresOptions,
} from './options.js';
import { StatementParameters, type Tuples } from './parameters.js';
import { makeEstimator } from './size.js';
import { buildStatements, type Statements } from './statements.js';
import { columnArrayLiteral, type RowValue, toRowValue } from './values.js';

/** Counters of what the adapter sent. They only grow. */
export interface PostgresAdapterStats {
  /** `write()` calls: batches, retries, and the halves of split batches. */
  writes: number;
  /** Every statement sent: BEGIN / COMMIT / ROLLBACK, INSERT, COPY, staging DDL. */
  statements: number;
  /** Statements that carried rows: INSERT, COPY, and the merge of a staging table. */
  dataStatements: number;
  /** Writes that committed. */
  committed: number;
  /** Writes that failed (each is then retried, split or fatal, as `classify` says). */
  failed: number;
  /** Explicit ROLLBACKs after a failed statement inside a transaction. */
  rollbacks: number;
  /** Rows of committed writes. */
  rows: number;
  /** Records refused by `map` (reported as rejected, not sent). */
  unmappable: number;
  /** Bytes of COPY data sent (committed or not). */
  copyBytes: number;
  /** The most parameters any one statement bound. Never above 65,535. */
  maxParameters: number;
  /** Connections handed back to the pool as broken, so that the pool destroyed them. */
  discardedConnections: number;
  /** `'error'` events of idle pool clients (e.g. a server restart), absorbed by the adapter. */
  poolErrors: number;
  /** `'error'` events of a client while the adapter had it checked out. */
  clientErrors: number;
  /**
   * With `storeOffsets`: transactions rolled back because the stored offset of a partition was
   * already past the batch's first record (its records were stored before, by this or another
   * consumer); the batch is then written again without them.
   */
  offsetConflicts: number;
  /** With `storeOffsets`: COMMITs whose outcome was unknown (connection lost) and that the stored offsets showed had landed. */
  commitsResolved: number;
}

/** What one attempt at a batch did: the records refused, or the stored offsets it found ahead of it. */
interface Attempt {
  readonly rejected: Array<{ index: number; error: unknown }>;
  readonly conflict: StoredOffsets | undefined;
}

/** Rounds of "someone stored these already, write the rest" before a batch gives up (and is retried). */
const MAX_OFFSET_ROUNDS = 5;

/** The parts of one batch, as the adapter will send them. */
type Step =
  /** INSERT statements: their parameters, and the rows they hold in all. */
  | { readonly kind: 'values'; readonly statements: readonly Tuples[]; readonly rows: number }
  /** COPY into the target (`copy` mode): `fill` encodes the batch while its data goes out. */
  | { readonly kind: 'copy'; readonly fill: (data: CopyChunks) => number }
  /** COPY into a staging table, then a merge into the target (large upserts). */
  | { readonly kind: 'stage'; readonly rows: readonly (readonly RowValue[])[] };

/**
 * A `SinkAdapter` that writes batches into one PostgreSQL table through the application's pg
 * Pool, in `insert`, `copy` or `upsert` mode. Each batch is one transaction.
 */
export class PostgresAdapter<T> implements SinkAdapter<T> {
  readonly kind = 'postgres';
  readonly options: Readonly<ResolvedPostgresOptions<T>>;
  private readonly sql: Statements;
  private readonly width: number;
  private readonly keyIndexes: number[];
  private readonly estimator: (record: T) => number;
  private readonly counters: PostgresAdapterStats = {
    writes: 0,
    statements: 0,
    dataStatements: 0,
    committed: 0,
    failed: 0,
    rollbacks: 0,
    rows: 0,
    unmappable: 0,
    copyBytes: 0,
    maxParameters: 0,
    discardedConnections: 0,
    poolErrors: 0,
    clientErrors: 0,
    offsetConflicts: 0,
    commitsResolved: 0,
  };
  /** With `storeOffsets`: the progress table and its compare-and-set. */
  private readonly ledger: OffsetLedger | undefined;
  private readonly onPoolError = () => {
    this.counters.poolErrors++;
  };
  private closed = false;

  constructor(options: PostgresAdapterOptions<T>) {
    this.options = resolvePostgresOptions(options);
    this.sql = buildStatements(this.options as ResolvedPostgresOptions<unknown>);
    this.width = this.options.columns.length;
    const names = this.options.columns.map((c) => c.name);
    this.keyIndexes = (this.options.conflict?.key ?? []).map((k) => names.indexOf(k));
    this.estimator = makeEstimator(this.options);
    const so = this.options.storeOffsets;
    this.ledger = so === undefined ? undefined : new OffsetLedger(so, this.sql.target, this.options.pool);
    // Without a listener, an idle client's 'error' (57P01 on a server restart) crashes the process.
    this.options.pool.on('error', this.onPoolError);
  }

  /** A copy of the counters. */
  stats(): PostgresAdapterStats {
    return { ...this.counters };
  }

  classify(error: unknown): ErrorClass {
    return classifyPostgresError(error);
  }

  estimateBytes(record: T): number {
    return this.estimator(record);
  }

  // No `prepare()`: every mode maps a record when its batch is written (and at accept only to
  // size it). A row held per buffered record until its batch leaves cost the garbage collector
  // more than mapping the record a second time costs (benchmarks/README.md, issue 19).

  private wireRow(values: readonly unknown[]): RowValue[] {
    const row = new Array<RowValue>(this.width);
    for (let c = 0; c < this.width; c++) row[c] = toRowValue(values[c]);
    return row;
  }

  /** Detaches from the pool. The pool itself belongs to the application and stays open. */
  async close(): Promise<void> {
    if (this.closed) return;
    this.closed = true;
    this.options.pool.off('error', this.onPoolError);
  }

  // `void | PartialWrite` is the SinkAdapter contract's own return type.
  // biome-ignore lint/suspicious/noConfusingVoidType: matches SinkAdapter.write
  async write(batch: Batch<T>): Promise<void | PartialWrite> {
    this.counters.writes++;
    let stored: StoredOffsets | undefined;
    for (let round = 1; ; round++) {
      const { rejected, conflict } = await this.attempt(batch, stored);
      if (conflict === undefined) return rejected.length > 0 ? { rejected } : undefined;
      // Records below a stored offset are in the table already: write the rest.
      this.counters.offsetConflicts++;
      stored = conflict;
      if (round >= MAX_OFFSET_ROUNDS) {
        throw new StoreError(
          `The stored offsets of ${this.sql.target} kept moving past this batch (${round} rounds); the batch is retried`,
          {
            driverCode: '40001',
            details: { table: this.options.table, mode: this.options.mode, step: 'offsets' },
          },
        );
      }
    }
  }

  /**
   * The offsets of a Kafka bridge's consumer group stored with this table's rows, for the given
   * partitions: the next offset to read per partition (absent where nothing is stored). Used by
   * the bridge on assignment to skip what this table already holds.
   */
  async storedOffsets(
    group: string,
    partitions: ReadonlyArray<{ topic: string; partition: number }>,
  ): Promise<Array<{ topic: string; partition: number; offset: string }>> {
    const ledger = this.ledger;
    if (ledger === undefined)
      throw invalidOption(
        'storeOffsets',
        'set on the PostgreSQL sink whose stored offsets are read',
        undefined,
      );
    if (group !== ledger.group)
      throw invalidOption('groupId', `the group the sink stores offsets for ("${ledger.group}")`, group);
    const stored = await ledger.read(partitions).catch((error: unknown) => {
      throw this.wrap(error, 'read stored offsets');
    });
    const out: Array<{ topic: string; partition: number; offset: string }> = [];
    for (const p of partitions) {
      const next = stored.get(partitionKey(p.topic, p.partition));
      if (next !== undefined) out.push({ topic: p.topic, partition: p.partition, offset: next.toString() });
    }
    return out;
  }

  /**
   * One transaction for the batch's records, leaving out those below `stored` (already in the
   * table) and, with `storeOffsets`, second copies of a source message in the batch. With
   * `storeOffsets` its offsets commit with it, or it reports what is stored ahead.
   */
  private async attempt(batch: Batch<T>, stored: StoredOffsets | undefined): Promise<Attempt> {
    const rejected: Array<{ index: number; error: unknown }> = [];
    const { map, mode, csvLine } = this.options;
    const metas = batch.metas;
    // A second copy of a source message in this batch lands with its first, never twice.
    const repeated = this.ledger === undefined ? undefined : repeatedSourceMessages(metas);
    const skip = (i: number): boolean => {
      if (repeated?.has(i)) return true;
      if (stored === undefined) return false;
      const c = kafkaCoordinates(metas[i]);
      if (c === undefined) return false;
      const s = stored.get(partitionKey(c.topic, c.partition));
      return s !== undefined && c.offset < s;
    };
    // The records sent, for the offsets that go with them.
    const sent: number[] = [];
    let sentRanges: Ranges | undefined;
    const offsets =
      this.ledger === undefined
        ? undefined
        : () => {
            sentRanges = stopAtRefused(
              rangesOf(metas, sent),
              metas,
              rejected.map((r) => r.index),
            );
            return sentRanges;
          };
    let steps: Step[];
    if (mode === 'copy') {
      // Encoded inside the transaction, once the COPY statement is on its way: the server parses
      // the first chunks while the rest are encoded.
      const fill = (data: CopyChunks): number => {
        rejected.length = 0;
        sent.length = 0;
        let count = 0;
        for (let i = 0; i < batch.records.length; i++) {
          if (skip(i)) continue;
          try {
            const ready = csvLine?.(batch.records[i] as T);
            if (ready !== undefined) data.pushBytes(ready);
            else data.row(this.mapped(map(batch.records[i] as T)));
            sent.push(i);
            count++;
          } catch (error) {
            rejected.push({ index: i, error: this.unmappable(error) });
          }
        }
        return count;
      };
      steps = [{ kind: 'copy', fill }];
    } else if (mode === 'insert') {
      // Each row's values go straight into its statement's parameters.
      const params = new StatementParameters(this.width, this.options.rowsPerStatement, batch.records.length);
      for (let i = 0; i < batch.records.length; i++) {
        if (skip(i)) continue;
        try {
          params.add(this.mapped(map(batch.records[i] as T)));
        } catch (error) {
          rejected.push({ index: i, error: this.unmappable(error) });
          continue;
        }
        sent.push(i);
      }
      if (params.total === 0) return { rejected, conflict: undefined };
      steps = [{ kind: 'values', statements: params.statements(), rows: params.total }];
    } else {
      // An upsert's rows are cut into rounds by key first, so each is a row of wire values.
      const rows: RowValue[][] = [];
      for (let i = 0; i < batch.records.length; i++) {
        if (skip(i)) continue;
        try {
          rows.push(this.wireRow(this.mapped(map(batch.records[i] as T))));
        } catch (error) {
          rejected.push({ index: i, error: this.unmappable(error) });
          continue;
        }
        sent.push(i);
      }
      if (rows.length === 0) return { rejected, conflict: undefined };
      steps = this.plan(rows);
    }
    try {
      return { rejected, conflict: await this.transact(steps, offsets) };
    } catch (error) {
      // A COMMIT whose outcome is unknown is settled by the stored offsets, not by guessing.
      if (sentRanges !== undefined && error instanceof StoreError && error.details.outcomeUnknown === true) {
        const now = await this.ledger!.read([...sentRanges.values()], true).catch(() => undefined);
        if (now !== undefined && allStored(sentRanges, now)) {
          this.counters.commitsResolved++;
          this.counters.committed++;
          return { rejected, conflict: undefined };
        }
      }
      throw error;
    }
  }

  private mapped(values: readonly unknown[]): readonly unknown[] {
    if (!Array.isArray(values) || values.length !== this.width) {
      throw new TypeError(
        `map() returned ${Array.isArray(values) ? `${values.length} values` : typeof values}, expected ${this.width} values`,
      );
    }
    return values;
  }

  private unmappable(error: unknown): SpillwayError {
    this.counters.unmappable++;
    return new SpillwayError(
      'SPILLWAY_RECORD_REJECTED',
      `A record for ${this.sql.target} could not be mapped to its columns: ${messageOf(error)}`,
      {
        cause: error,
        details: { table: this.options.table, schema: this.options.schema, mode: this.options.mode },
      },
    );
  }

  /** Cuts an upsert batch into the steps it is sent as. */
  private plan(rows: RowValue[][]): Step[] {
    const { conflict, upsertViaCopyAbove } = this.options;
    // ON CONFLICT DO UPDATE refuses to touch one row twice in a statement (21000). Records of
    // one key are applied in rounds, in batch order, which is what writing them one by one would do.
    const rounds = conflict?.action === 'update' ? this.rounds(rows) : [rows];
    return rounds.map(
      (r): Step => (r.length > upsertViaCopyAbove ? { kind: 'stage', rows: r } : this.tuples(r)),
    );
  }

  /** A values step over rows of wire values. */
  private tuples(rows: readonly RowValue[][]): Step {
    const params = new StatementParameters(this.width, this.options.rowsPerStatement, rows.length);
    for (const row of rows) params.add(row);
    return { kind: 'values', statements: params.statements(), rows: params.total };
  }

  private rounds(rows: RowValue[][]): RowValue[][][] {
    // Keys seen once go in a Set (one hash operation per row, the common case); only a key seen
    // again gets a count of its rounds.
    const seen = new Set<string | number>();
    let again: Map<string | number, number> | undefined;
    const first: RowValue[][] = [];
    const out: RowValue[][][] = [first];
    const keys = this.keyIndexes;
    const one = keys.length === 1 ? keys[0]! : -1;
    for (const row of rows) {
      // A number key is its own map key, with no string made for it. (A column that mixes the
      // number 1 and the text '1' puts both in one round: the server refuses it with 21000, and
      // the batch is split until they are apart.)
      const v = one >= 0 ? row[one] : undefined;
      const k =
        typeof v === 'number'
          ? v
          : one >= 0
            ? keyPart(v as RowValue)
            : JSON.stringify(keys.map((i) => keyPart(row[i] as RowValue)));
      const size = seen.size;
      seen.add(k);
      if (seen.size !== size) {
        first.push(row);
        continue;
      }
      again ??= new Map();
      // Rounds this key is in so far: the first, and one per earlier repeat.
      const n = again.get(k) ?? 1;
      again.set(k, n + 1);
      const round = out[n];
      if (round === undefined) out[n] = [row];
      else round.push(row);
    }
    return out;
  }

  private statementCount(steps: readonly Step[]): number {
    let n = 0;
    for (const s of steps) {
      if (s.kind === 'copy') n += 1;
      else if (s.kind === 'values') n += s.statements.length;
      else n += 3;
    }
    return n;
  }

  /**
   * Sends `steps` as one transaction. With `offsets` (storeOffsets) the ranges it returns, read
   * once the data is sent, are claimed in the same transaction; if the stored offsets are ahead
   * the transaction rolls back and resolves with them.
   */
  private async transact(steps: readonly Step[], offsets?: () => Ranges): Promise<StoredOffsets | undefined> {
    let client: PoolClient;
    try {
      client = await this.options.pool.connect();
    } catch (error) {
      this.counters.failed++;
      throw this.wrap(error, 'connect');
    }
    let broken: unknown;
    const onError = (error: unknown) => {
      this.counters.clientErrors++;
      broken ??= error;
    };
    client.on('error', onError);
    // One statement is a transaction of its own; more need BEGIN / COMMIT to stay one.
    const explicit = this.statementCount(steps) + (offsets === undefined ? 0 : 1) > 1;
    // A batch that is one staging round goes as one simple query, BEGIN to COMMIT, with its COPY
    // data right behind it: one round trip, and the server has the whole batch to work on while
    // this process does anything else.
    const only = steps.length === 1 ? steps[0] : undefined;
    const oneTrip = only?.kind === 'stage' && offsets === undefined;
    let step = 'begin';
    let failure: unknown;
    try {
      if (oneTrip) {
        step = 'merge';
        this.counters.statements += 4;
        this.counters.dataStatements++;
        const { createStage, mergeStage, stage } = this.sql;
        const text = `BEGIN; ${createStage}; ${this.sql.copy(stage)}; ${mergeStage}; COMMIT`;
        const rows = await this.copy(client, text, this.copyRows(only.rows));
        this.counters.committed++;
        this.counters.rows += rows;
        return undefined;
      }
      if (offsets !== undefined && this.ledger !== undefined) {
        step = 'offsets';
        await this.ledger.ensure(client);
      }
      step = 'begin';
      if (explicit) await this.run(client, 'BEGIN');
      let staged = false;
      let rows = 0;
      for (const s of steps) {
        if (s.kind === 'values') {
          step = 'insert';
          for (const t of s.statements) await this.sendInsert(client, t.rows, t.values);
          rows += s.rows;
        } else if (s.kind === 'copy') {
          step = 'copy';
          this.counters.dataStatements++;
          rows += await this.copy(client, this.sql.copy(this.sql.target), s.fill);
        } else {
          step = 'stage';
          await this.run(client, staged ? this.sql.truncateStage : this.sql.createStage);
          staged = true;
          step = 'copy';
          await this.copy(client, this.sql.copy(this.sql.stage), this.copyRows(s.rows));
          rows += s.rows.length;
          step = 'merge';
          this.counters.dataStatements++;
          await this.run(client, this.sql.mergeStage);
        }
      }
      const ranges = offsets?.();
      if (ranges !== undefined && ranges.size > 0 && this.ledger !== undefined) {
        step = 'offsets';
        this.counters.statements++;
        const ahead = await this.ledger.claim(client, ranges);
        if (ahead !== undefined) {
          step = 'rollback';
          await this.run(client, 'ROLLBACK');
          this.counters.rollbacks++;
          return ahead;
        }
      }
      step = 'commit';
      if (explicit) await this.run(client, 'COMMIT');
      this.counters.committed++;
      this.counters.rows += rows;
      return undefined;
    } catch (error) {
      failure = error;
      this.counters.failed++;
      // The next borrower of this client would get 25P02 inside an aborted transaction.
      if (explicit && broken === undefined && !isConnectionError(error)) {
        try {
          await this.run(client, 'ROLLBACK');
          this.counters.rollbacks++;
        } catch (rollbackError) {
          broken = rollbackError;
        }
      }
      // A connection lost while the last statement (COMMIT, or the one autocommitted statement,
      // or the one query that ends in COMMIT) was on its way may have committed: say so, since a
      // retry can then write the rows twice.
      const unknown = isConnectionError(error) && (step === 'commit' || !explicit || oneTrip);
      throw this.wrap(error, step, unknown);
    } finally {
      client.off('error', onError);
      const discard = broken ?? (failure !== undefined && isConnectionError(failure) ? failure : undefined);
      if (discard !== undefined) this.counters.discardedConnections++;
      // release(error) makes the pool destroy the client instead of handing it out again.
      client.release(discard === undefined ? undefined : discard instanceof Error ? discard : true);
    }
  }

  private async run(client: PoolClient, text: string): Promise<void> {
    this.counters.statements++;
    await client.query(text);
  }

  /** One INSERT of `rows` rows whose parameters are `flat` (row-major). */
  private async sendInsert(client: PoolClient, rows: number, flat: readonly RowValue[]): Promise<void> {
    let values = flat;
    if (this.options.insertForm === 'unnest') {
      const columns = new Array<RowValue>(this.width);
      for (let c = 0; c < this.width; c++) columns[c] = columnArrayLiteral(flat, c, this.width);
      values = columns;
    }
    if (values.length > this.counters.maxParameters) this.counters.maxParameters = values.length;
    this.counters.statements++;
    this.counters.dataStatements++;
    await client.query({ text: this.sql.values(rows), values: values as RowValue[] });
  }

  /** Encodes rows of wire values as COPY data (the staging table of an upsert). */
  private copyRows(rows: readonly (readonly RowValue[])[]): (data: CopyChunks) => number {
    return (data) => {
      for (const row of rows) data.row(row);
      return rows.length;
    };
  }

  /**
   * A query holding one `COPY … FROM STDIN` (`text`); `fill` encodes the rows, whose chunks leave
   * as they are made. Resolves with the rows the COPY took.
   */
  private async copy(client: PoolClient, text: string, fill: (data: CopyChunks) => number): Promise<number> {
    this.counters.statements++;
    const copy = new CopyIn(text);
    // The client is ours and idle: pg submits the statement right away, and each chunk follows.
    client.query(copy as never);
    const data = new CopyChunks((chunk) => copy.send(chunk), this.options.copyFormat);
    let rows: number;
    try {
      rows = fill(data);
      data.finish();
      copy.end();
    } catch (error) {
      copy.fail(`encoding the batch failed: ${messageOf(error)}`);
      await copy.done.catch(() => undefined);
      throw error;
    } finally {
      this.counters.copyBytes += data.bytes;
    }
    await copy.done;
    return rows;
  }

  private get batchName(): string {
    return this.options.mode === 'copy' ? 'a copy' : `an ${this.options.mode}`;
  }

  /** The error the engine and the user see: SQLSTATE, constraint and the driver's error kept. */
  private wrap(error: unknown, step: string, outcomeUnknown = false): StoreError {
    const e = (typeof error === 'object' && error !== null ? error : {}) as Record<string, unknown>;
    const sqlstate = sqlstateOf(error);
    const errorClass = classifyPostgresError(error);
    const target = this.sql.target;
    const str = (v: unknown) => (typeof v === 'string' && v.length > 0 ? v : undefined);
    const constraint = str(e.constraint);
    // Only names and codes: the server's `detail` and `where` can quote row contents.
    const details: Record<string, unknown> = {
      table: this.options.table,
      mode: this.options.mode,
      step,
      errorClass,
    };
    if (this.options.schema !== undefined) details.schema = this.options.schema;
    if (outcomeUnknown) details.outcomeUnknown = true;
    if (sqlstate !== undefined) details.sqlstate = sqlstate;
    if (constraint !== undefined) details.constraint = constraint;
    for (const key of ['column', 'dataType', 'severity'] as const) {
      const v = str(e[key]);
      if (v !== undefined) details[key] = v;
    }
    const driverMessage = messageOf(error);
    let message: string;
    if (sqlstate === '42P01') message = `Table ${target} does not exist (SQLSTATE 42P01): ${driverMessage}`;
    else if (sqlstate === '42703')
      message = `A column of ${target} does not exist (SQLSTATE 42703): ${driverMessage}`;
    else if (sqlstate !== undefined) {
      message = `PostgreSQL refused ${this.batchName} batch into ${target} (SQLSTATE ${sqlstate}${constraint ? `, constraint "${constraint}"` : ''}): ${driverMessage}`;
    } else if (isConnectionError(error)) {
      message = `Lost the connection to PostgreSQL during ${step} of ${this.batchName} batch into ${target}: ${driverMessage}`;
    } else
      message = `${this.batchName[0]!.toUpperCase()}${this.batchName.slice(1)} batch into ${target} failed during ${step}: ${driverMessage}`;
    const errno = typeof e.code === 'string' ? e.code : undefined;
    return new StoreError(message, { cause: error, driverCode: sqlstate ?? errno, details });
  }
}

/** An unambiguous string for one key value (its type tagged, so 'x' never equals a Buffer of x). */
function keyPart(v: RowValue): string {
  if (v === null) return 'n';
  // A number is the same key as its text (pg sends it as that text).
  if (typeof v === 'number') return `s${v}`;
  return typeof v === 'string' ? `s${v}` : `b${v.toString('hex')}`;
}

/** Creates a PostgreSQL adapter. Options are validated here (a `TypeError` names the bad one). */
export function postgresAdapter<T>(options: PostgresAdapterOptions<T>): PostgresAdapter<T> {
  return new PostgresAdapter(options);
}

/** Options of `postgresSink`: the adapter's and the Sink's in one object. */
export type PostgresSinkOptions<T> = PostgresAdapterOptions<T> & SinkOptions<T>;

/** A Sink writing into PostgreSQL: `new Sink(postgresAdapter(adapterOptions), sinkOptions)` in one call. */
export function postgresSink<T>(options: PostgresSinkOptions<T>): Sink<T> {
  const adapterOptions: Record<string, unknown> = {};
  const sinkOptions: Record<string, unknown> = {};
  for (const [key, value] of Object.entries(options ?? {})) {
    (ADAPTER_OPTION_NAMES.has(key) ? adapterOptions : sinkOptions)[key] = value;
  }
  const adapter = postgresAdapter(adapterOptions as unknown as PostgresAdapterOptions<T>);
  return new Sink(adapter, sinkOptions as SinkOptions<T>);
}
