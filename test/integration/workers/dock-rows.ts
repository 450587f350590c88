// Tandem Bikes dock status events as the bridge tests stream them: the Kafka message format, the
// decoder, the PostgreSQL table, and a small SinkAdapter that writes rows with a plain multi-row
// INSERT (or INSERT … ON CONFLICT for upserts) through `pg`.
//
// The bridge tests use this adapter rather than @spillway/postgres, which was being written at the
// same time; it is deliberately minimal (no COPY, no statement splitting beyond the batch size).
import type { Batch, ErrorClass, PartialWrite, SinkAdapter } from '@spillway/core';
import { DecodeError, type KafkaSource } from '@spillway/kafka';
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
export async function createDockTable(pool: pg.Pool | pg.Client, table: string, mode: WriteMode): Promise<void> {
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

/**
 * Reads a `pg` error. Source: PostgreSQL documentation, Appendix A "PostgreSQL Error Codes":
 * class 08 (connection exception), 57P01-57P03 (admin shutdown, crash shutdown, cannot connect
 * now), 53 (insufficient resources), 40001 / 40P01 (serialization failure, deadlock) are
 * transient; class 22 (data exception) and 23 (integrity constraint violation) are bad rows.
 * Socket errors without a SQLSTATE (ECONNREFUSED, "Connection terminated") are transient.
 */
export function classifyPgError(error: unknown): ErrorClass {
  // Only a server error (it has a severity) carries a SQLSTATE: Node's EPIPE also has five letters.
  const e = error as { code?: unknown; severity?: unknown } | null;
  const code = e?.code;
  if (typeof e?.severity === 'string' && typeof code === 'string' && /^[0-9A-Z]{5}$/.test(code)) {
    if (code.startsWith('08') || code.startsWith('57P') || code.startsWith('53') || code === '40001' || code === '40P01') return 'retry';
    if (code.startsWith('22') || code.startsWith('23')) return 'split';
    return 'fatal';
  }
  return 'retry';
}

export interface RowsAdapterHooks {
  /** Called with the rows of each statement that PostgreSQL acknowledged. */
  onDurable?: (rows: readonly DockRow[]) => void;
}

export function pgRowsAdapter(pool: pg.Pool, table: string, mode: WriteMode, hooks: RowsAdapterHooks = {}): SinkAdapter<DockRow> {
  const cols = '(seq, kpartition, koffset, dock, bikes)';
  const conflict = mode === 'upsert' ? ' ON CONFLICT (seq) DO UPDATE SET kpartition = EXCLUDED.kpartition, koffset = EXCLUDED.koffset, dock = EXCLUDED.dock, bikes = EXCLUDED.bikes' : '';
  return {
    kind: 'postgres-test-rows',
    async write(batch: Batch<DockRow>): Promise<void | PartialWrite> {
      // Source: PostgreSQL Frontend/Backend Protocol, Bind: at most 65,535 parameters per
      // statement; 5 per row keeps a 1000-row batch far below it.
      const params: unknown[] = [];
      const tuples: string[] = [];
      for (const r of batch.records) {
        const i = params.length;
        params.push(r.seq, r.partition, r.offset, r.dock, r.bikes);
        tuples.push(`($${i + 1}, $${i + 2}, $${i + 3}, $${i + 4}, $${i + 5})`);
      }
      await pool.query(`INSERT INTO ${table} ${cols} VALUES ${tuples.join(', ')}${conflict}`, params);
      hooks.onDurable?.(batch.records);
    },
    classify: classifyPgError,
    estimateBytes: (r) => 48 + r.dock.length,
  };
}
