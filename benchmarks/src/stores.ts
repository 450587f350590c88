import type { Batch, ErrorClass, SinkAdapter } from '@spillway/core';
import type { DockStatus } from './records.js';

/** The stores a cell can write to. */
export type StoreKind = 'noop' | 'sim' | 'postgres' | 'redis' | 'kafka' | 'bridge';

export const STORE_KINDS: readonly StoreKind[] = ['noop', 'sim', 'postgres', 'redis', 'kafka', 'bridge'];

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

/** Resolves at once: measures the engine and the harness alone. */
class NoopAdapter implements SinkAdapter<DockStatus> {
  readonly kind = 'noop';
  async write(_batch: Batch<DockStatus>): Promise<void> {}
  classify(): ErrorClass {
    return 'fatal';
  }
}

/**
 * Resolves after a simulated store round trip: `latencyMs` per write plus `perRecordUs` per
 * record, the cost model of a store that pays a fixed price per request and a small one per row.
 */
class SimulatedAdapter implements SinkAdapter<DockStatus> {
  readonly kind = 'sim';
  constructor(
    private readonly latencyMs: number,
    private readonly perRecordUs: number,
  ) {}
  write(batch: Batch<DockStatus>): Promise<void> {
    const ms = this.latencyMs + (batch.records.length * this.perRecordUs) / 1000;
    return new Promise((resolve) => setTimeout(resolve, ms));
  }
  classify(): ErrorClass {
    return 'retry';
  }
}

/** Opens the store of a cell. Store-backed kinds load their adapter package on demand. */
export async function openStore(spec: StoreSpec, cellId: string): Promise<OpenedStore> {
  switch (spec.kind) {
    case 'noop':
      return { adapter: new NoopAdapter(), dispose: async () => {} };
    case 'sim':
      return {
        adapter: new SimulatedAdapter(spec.latencyMs ?? 2, spec.perRecordUs ?? 1),
        dispose: async () => {},
      };
    case 'postgres': {
      const { openPostgres } = await import('./store-postgres.js');
      return openPostgres(spec, cellId);
    }
    case 'redis': {
      const { openRedis } = await import('./store-redis.js');
      return openRedis(spec, cellId);
    }
    case 'kafka': {
      const { openKafka } = await import('./store-kafka.js');
      return openKafka(spec, cellId);
    }
    case 'bridge':
      throw new TypeError('the bridge store is driven by runBridgeCell(), not openStore()');
  }
}
