/**
 * Where a record came from in a Kafka source, for adapters that store offsets with the data
 * (exactly-once from the bridge): the record's topic, partition and offset, and the range of
 * offsets a batch holds per source partition. Partitions are named with `partitionKey`.
 */
import { partitionKey, toOffset } from './progress.js';
import type { RecordMeta } from './types.js';

/** The offsets of one source partition in a batch: `first` written, `next` to read after it. */
export interface PartitionRange {
  readonly topic: string;
  readonly partition: number;
  first: bigint;
  next: bigint;
}

/** Stored next offsets by `partitionKey(topic, partition)`. */
export type StoredOffsets = Map<string, bigint>;

/** The coordinates of a record from a Kafka source, or undefined for any other record. */
export function kafkaCoordinates(
  meta: RecordMeta | undefined,
): { topic: string; partition: number; offset: bigint } | undefined {
  if (meta === undefined || typeof meta.topic !== 'string' || meta.partition === undefined) return undefined;
  const { offset } = meta;
  if (offset === undefined) return undefined;
  const partition = Number(meta.partition);
  if (!Number.isInteger(partition)) return undefined;
  return { topic: meta.topic, partition, offset: toOffset(offset) };
}

/**
 * The indexes of records whose source message came earlier in the same batch (same topic,
 * partition and offset): a bridge fetches a message again after a rebalance while its first copy
 * still waits in the sink. A store that keeps offsets with the data writes such a copy with its
 * first, never twice. Undefined when there is none (the usual case: one pass, no set).
 */
export function repeatedSourceMessages(
  metas: ReadonlyArray<RecordMeta | undefined>,
): Set<number> | undefined {
  // Per partition the offsets of a batch normally only go up: a copy shows as a step back.
  const last = new Map<string, bigint>();
  let stepBack = false;
  for (let i = 0; i < metas.length && !stepBack; i++) {
    const c = kafkaCoordinates(metas[i]);
    if (c === undefined) continue;
    const key = partitionKey(c.topic, c.partition);
    const before = last.get(key);
    if (before !== undefined && c.offset <= before) stepBack = true;
    else last.set(key, c.offset);
  }
  if (!stepBack) return undefined;
  const seen = new Set<string>();
  const repeated = new Set<number>();
  for (let i = 0; i < metas.length; i++) {
    const c = kafkaCoordinates(metas[i]);
    if (c === undefined) continue;
    const id = `${partitionKey(c.topic, c.partition)}@${c.offset}`;
    if (seen.has(id)) repeated.add(i);
    else seen.add(id);
  }
  return repeated.size > 0 ? repeated : undefined;
}
