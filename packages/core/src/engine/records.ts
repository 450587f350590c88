/**
 * What the engine knows about the records it holds: an accepted record (`Entry`), a batch in
 * flight, and a barrier (a wait for a set of records to become terminal).
 */
import type { FlushReason, RecordMeta } from '../types.js';

/** One accepted record and what the engine knows about it. */
export interface Entry<T> {
  readonly record: T;
  readonly meta: RecordMeta | undefined;
  readonly bytes: number;
  /** The adapter's `prepare()` result, if it has one. */
  readonly prepared: unknown;
  readonly acceptedAt: number;
  readonly key: string | undefined;
  /** Set when a manual / shutdown / revoke flush asked for this record to leave now. */
  forced: FlushReason | undefined;
  /** Waits (flush(), revoke(), writeDurable()) that this record holds open. */
  barriers: Barrier[] | undefined;
  /** True once durable or dead-lettered. */
  done: boolean;
}

/** Resolves when `remaining` records have become terminal. */
export interface Barrier {
  remaining: number;
  resolve(): void;
  reject(error: unknown): void;
  onOutcome?: (outcome: Outcome) => void;
}

/** How a record ended. */
export type Outcome = 'durable' | 'dead-lettered';

/** A batch handed to the adapter, until every record of it is terminal. */
export interface InFlight<T> {
  readonly id: number;
  readonly entries: Entry<T>[];
  /** Records of this batch not yet terminal. */
  open: number;
  /** Records of this batch waiting out a retry back-off. */
  retrying: number;
}

export function sumBytes<T>(entries: readonly Entry<T>[]): number {
  let n = 0;
  for (const e of entries) n += e.bytes;
  return n;
}
