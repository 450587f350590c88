// Tandem Bikes dock status events as the bridge tests stream them: the Kafka message format, the
// decoder, the PostgreSQL table, and the @spillway/postgres adapter that writes the rows.
import type { Batch, PartialWrite, SinkAdapter } from '@spillway/core';
import { DecodeError, type KafkaSource } from '@spillway/kafka';
import { type PostgresAdapter, postgresAdapter } from '@spillway/postgres';
import type { KafkaMessage } from 'kafkajs';
import type pg from 'pg';

export interface DockEvent {
  seq: number;
  dock: string;
  bikes: number;
}

export interface DockRow extends DockEvent {
  partition: number;
  offset: string;
}

export type WriteMode = 'insert' | 'upsert';

export function dockEvent(seq: number): DockEvent {
  return { seq, dock: `dock-${String(seq % 97).padStart(3, '0')}`, bikes: seq % 13 };
}

export function encodeEvent(e: DockEvent): string {
  return JSON.stringify(e);
}

/** JSON → row; anything else is undecodable. */
export function decodeDockEvent(message: KafkaMessage, source: KafkaSource): DockRow | DecodeError {
  let parsed: unknown;
  try {
    parsed = JSON.parse(message.value?.toString('utf8') ?? '');
  } catch (error) {
    return new DecodeError('dock event is not JSON', { cause: error });
  }
  const e = parsed as Partial<DockEvent> | null;
  if (!e || typeof e.seq !== 'number' || typeof e.dock !== 'string' || typeof e.bikes !== 'number') {
    return new DecodeError('dock event lacks seq, dock or bikes');
  }
  return { seq: e.seq, dock: e.dock, bikes: e.bikes, partition: source.partition, offset: message.offset };
}

/** Insert mode keeps every copy (duplicates are counted); upsert mode keys on `seq`. */
export async function createDockTable(
  pool: pg.Pool | pg.Client,
  table: string,
  mode: WriteMode,
): Promise<void> {
  await pool.query(
    `CREATE TABLE ${table} (
       seq bigint NOT NULL${mode === 'upsert' ? ' PRIMARY KEY' : ''},
       kpartition int NOT NULL,
       koffset bigint NOT NULL,
       dock text NOT NULL,
       bikes int NOT NULL CHECK (bikes >= 0),
       written_at timestamptz NOT NULL DEFAULT clock_timestamp())`,
  );
}

export interface RowsAdapterHooks {
  /** Called with the rows of each batch that PostgreSQL acknowledged. */
  onDurable?: (rows: readonly DockRow[]) => void;
  /** Store each batch's offsets with its rows, for this consumer group (exactly-once). */
  storeOffsetsFor?: string;
}

/** The adapter, with the stored-offsets reader when `storeOffsetsFor` is given and no hook wraps it. */
export type RowsAdapter = SinkAdapter<DockRow> & Partial<Pick<PostgresAdapter<DockRow>, 'storedOffsets'>>;

/**
 * The dock-status table through @spillway/postgres (insert mode keeps every copy; upsert keys on
 * `seq`), reporting each acknowledged batch to `hooks.onDurable`.
 */
export function pgRowsAdapter(
  pool: pg.Pool,
  table: string,
  mode: WriteMode | 'copy',
  hooks: RowsAdapterHooks = {},
): RowsAdapter {
  const inner = postgresAdapter<DockRow>({
    pool,
    table,
    columns: ['seq', 'kpartition', 'koffset', 'dock', 'bikes'],
    map: (r) => [r.seq, r.partition, r.offset, r.dock, r.bikes],
    mode,
    ...(mode === 'upsert' ? { conflict: { key: ['seq'] } } : {}),
    ...(hooks.storeOffsetsFor === undefined ? {} : { storeOffsets: { group: hooks.storeOffsetsFor } }),
  });
  if (!hooks.onDurable) return inner;
  return {
    kind: inner.kind,
    async write(batch: Batch<DockRow>): Promise<PartialWrite | undefined> {
      const outcome = await inner.write(batch);
      const rejected = new Set((outcome?.rejected ?? []).map((r) => r.index));
      hooks.onDurable?.(
        rejected.size === 0 ? batch.records : batch.records.filter((_, i) => !rejected.has(i)),
      );
      return outcome ?? undefined;
    },
    classify: (error) => inner.classify(error),
    estimateBytes: (r) => inner.estimateBytes(r),
  };
}
