/**
 * What the engine knows about the records it holds: a batch's records as parallel columns (no
 * object per record), a batch in flight, a part of one, and a barrier (a wait for a set of
 * records to become terminal).
 */
import type { RecordMeta } from '../types.js';

/**
 * Records taken from the buffer, in accept order, as parallel columns: position `i` of every
 * column belongs to record `i`. A column most records leave empty is absent when none of the
 * buffer's records has used it.
 */
export interface Columns<T> {
  readonly records: T[];
  readonly metas: readonly (RecordMeta | undefined)[] | undefined;
  /** The adapter's `prepare()` results. */
  readonly prepared: readonly unknown[] | undefined;
  /** Estimated bytes of each record. */
  readonly sizes: readonly number[];
  /** Accept time of each record. */
  readonly times: readonly number[];
  /**
   * The ordering keys of the records, as runs: each distinct key of consecutive records once,
   * with how many records in a row have it (records without a key are left out). The scheduler
   * locks and unlocks a key once per run, not once per record.
   */
  readonly keys: KeyRuns | undefined;
  /** Waits (flush(), revoke(), writeDurable()) that each record holds open. */
  barriers: (Barrier[] | undefined)[] | undefined;
  /** Sum of `sizes`. */
  readonly bytes: number;
}

/** Ordering keys of consecutive records, run-length encoded: `counts[r]` records have `keys[r]`. */
export interface KeyRuns {
  readonly keys: readonly string[];
  readonly counts: readonly number[];
}

/** Appends one record's key to `runs` (a record without a key adds nothing). */
export function addKey(runs: { keys: string[]; counts: number[] }, key: string | undefined): void {
  if (key === undefined) return;
  const last = runs.keys.length - 1;
  if (last >= 0 && runs.keys[last] === key) runs.counts[last]!++;
  else {
    runs.keys.push(key);
    runs.counts.push(1);
  }
}

/** A batch handed to the adapter, until every record of it is terminal. */
export interface InFlight<T> extends Columns<T> {
  readonly id: number;
  /** Records of this batch not yet terminal. */
  open: number;
  /** 1 for each record that is terminal; made when a part of the batch settles before the rest. */
  done: Uint8Array | undefined;
  /** Records of this batch waiting out a retry back-off. */
  retrying: number;
}

/**
 * Some records of one batch, by their positions in it (ascending); `undefined` stands for the
 * whole batch, the common case, which needs no list.
 */
export type Part = readonly number[] | undefined;

/** Resolves when `remaining` records have become terminal. */
export interface Barrier {
  remaining: number;
  resolve(): void;
  reject(error: unknown): void;
  onOutcome?: (outcome: Outcome) => void;
}

/** How a record ended. */
export type Outcome = 'durable' | 'dead-lettered';

let noMetas: readonly undefined[] = Object.freeze([]);

/**
 * A metas column of `n` records that carry none: one frozen array of `undefined`, shared while
 * batches keep the same length (most do), instead of a new one per batch and per settlement.
 */
export function noMetasColumn(n: number): readonly undefined[] {
  if (noMetas.length !== n) noMetas = Object.freeze(new Array<undefined>(n).fill(undefined));
  return noMetas;
}

/** How many records `part` names. */
export function partLength<T>(batch: Columns<T>, part: Part): number {
  return part === undefined ? batch.records.length : part.length;
}

/** The positions `part` names, as a list. */
export function positions<T>(batch: Columns<T>, part: Part): readonly number[] {
  if (part !== undefined) return part;
  const n = batch.records.length;
  const all = new Array<number>(n);
  for (let i = 0; i < n; i++) all[i] = i;
  return all;
}

/** Estimated bytes of the records `part` names. */
export function partBytes<T>(batch: Columns<T>, part: Part): number {
  if (part === undefined) return batch.bytes;
  let n = 0;
  for (const i of part) n += batch.sizes[i]!;
  return n;
}

/** `column` at the positions `part` names (the column itself for the whole batch). */
export function pick<V>(column: readonly V[], part: Part): readonly V[] {
  if (part === undefined) return column;
  const out = new Array<V>(part.length);
  for (let k = 0; k < part.length; k++) out[k] = column[part[k]!]!;
  return out;
}
