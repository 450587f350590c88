import type { Batch, ErrorClass, SinkAdapter } from '@spillway/core';
import type { DockStatus } from './records.js';
import type { OpenedStore, StoreSpec } from './store-spec.js';

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
