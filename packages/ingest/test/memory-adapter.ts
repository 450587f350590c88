import { MemoryAdapter as CoreMemoryAdapter } from '@spillway/core/testing';

/**
 * Core's in-memory store, plus the source line of each stored row (the ingest reader puts the
 * physical line number in each record's `offset`). The integration tests use PostgreSQL.
 */
export class MemoryAdapter<T> extends CoreMemoryAdapter<T> {
  get lines(): number[] {
    return this.metas.map((meta) => Number(meta?.offset));
  }
}
