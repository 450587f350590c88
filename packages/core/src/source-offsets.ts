/**
 * Where a record came from in a Kafka source, for adapters that store offsets with the data
 * (exactly-once from the bridge): the record's topic, partition and offset, and the range of
 * offsets a batch holds per source partition. Partitions are named with `partitionKey`.
 */
import { toOffset } from './progress.js';
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
