import type { SinkAdapter } from '@spillway/core';
import type { DockStatus } from './records.js';

/** The stores a cell can write to. */
export type StoreKind = 'noop' | 'sim' | 'postgres' | 'redis' | 'kafka' | 'bridge';

export const STORE_KINDS: readonly StoreKind[] = ['noop', 'sim', 'postgres', 'redis', 'kafka', 'bridge'];

/** PostgreSQL the store kinds connect to when a spec names no URL: a local server's `test` database. */
export const DEFAULT_PG_URL = 'postgres://postgres@127.0.0.1:5432/test';
/** Redis the store kinds connect to when a spec names no URL. */
export const DEFAULT_REDIS_URL = 'redis://127.0.0.1:6379';

export interface StoreSpec {
  kind: StoreKind;
  /** Adapter mode where the adapter has several (PostgreSQL: insert, copy, upsert). */
  mode?: string;
  /** Connection URL (PostgreSQL, Redis). */
  url?: string;
  /** Kafka bootstrap addresses. */
  brokers?: string[];
  /** sim: fixed latency of one write, ms. */
  latencyMs?: number;
  /** sim: added latency per record of a write, µs. */
  perRecordUs?: number;
}

/** A store opened for one cell: the adapter, and a way to tidy up what the cell made. */
export interface OpenedStore {
  adapter: SinkAdapter<DockStatus>;
  /** Server version, for the report. */
  version?: string;
  /** Drops the table / keys / topic the cell made and closes connections. */
  dispose(): Promise<void>;
}

/** A short label such as `postgres/copy` or `sim(2ms)`. */
export function storeLabel(s: StoreSpec): string {
  if (s.kind === 'sim') return `sim(${s.latencyMs ?? 2}ms)`;
  if (s.kind === 'bridge') return `kafka→postgres/${s.mode ?? 'copy'}`;
  return s.mode ? `${s.kind}/${s.mode}` : s.kind;
}
