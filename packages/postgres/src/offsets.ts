/**
 * Offsets stored with the data (exactly-once from a Kafka bridge). Every batch's transaction
 * also moves, per source partition, the next offset to read in a progress table this adapter
 * owns, keyed by consumer group, target table, topic and partition. The move is a compare-and-set:
 * it succeeds only while the stored offset is at or below the first offset of the batch, so a
 * writer whose records someone else already stored (a consumer that lost its partitions, or a
 * retry of a batch that did commit) changes nothing, and learns what is stored.
 */
import type { RecordMeta } from '@spillway/core';
import { kafkaCoordinates, type PartitionRange, partitionKey, type StoredOffsets } from '@spillway/core/kit';
import type { Pool, PoolClient } from 'pg';
import { qualifiedName } from './identifiers.js';

/** Ranges by `topic:partition`. */
export type Ranges = Map<string, PartitionRange>;

/** The partitions of the records at `indexes`, each with its first offset and the next to read. */
export function rangesOf(metas: ReadonlyArray<RecordMeta | undefined>, indexes: Iterable<number>): Ranges {
  const ranges: Ranges = new Map();
  for (const i of indexes) {
    const c = kafkaCoordinates(metas[i]);
    if (c === undefined) continue;
    const key = partitionKey(c.topic, c.partition);
    const r = ranges.get(key);
    if (r === undefined)
      ranges.set(key, { topic: c.topic, partition: c.partition, first: c.offset, next: c.offset + 1n });
    else {
      if (c.offset < r.first) r.first = c.offset;
      if (c.offset >= r.next) r.next = c.offset + 1n;
    }
  }
  return ranges;
}

/**
 * Stops each range's next offset at the first record of its partition refused before sending (a
 * record `map()` could not map, dead-lettered only after this transaction): a crash before its
 * dead letter is written replays it instead of skipping it. The records after it in the batch and
 * partition are then written again on such a replay (at-least-once).
 */
export function stopAtRefused(
  ranges: Ranges,
  metas: ReadonlyArray<RecordMeta | undefined>,
  refused: Iterable<number>,
): Ranges {
  for (const i of refused) {
    const c = kafkaCoordinates(metas[i]);
    if (c === undefined) continue;
    const r = ranges.get(partitionKey(c.topic, c.partition));
    if (r !== undefined && c.offset < r.next) r.next = c.offset;
  }
  return ranges;
}

/** Every range is at or below what is stored: the batch is in the table already. */
export function allStored(ranges: Ranges, stored: StoredOffsets): boolean {
  for (const [key, r] of ranges) {
    const s = stored.get(key);
    if (s === undefined || s < r.next) return false;
  }
  return true;
}

export class OffsetLedger {
  readonly group: string;
  /** The target table as the progress rows name it. */
  private readonly target: string;
  private readonly table: string;
  private readonly pool: Pool;
  private ensured: Promise<void> | undefined;

  constructor(
    options: { group: string; table: string; schema: string | undefined },
    target: string,
    pool: Pool,
  ) {
    this.group = options.group;
    this.table = qualifiedName(options.table, options.schema);
    this.target = target;
    this.pool = pool;
  }

  /** Creates the progress table if it is missing (once per adapter, again after a failure). */
  ensure(client: PoolClient | Pool): Promise<void> {
    this.ensured ??= client
      .query(
        `CREATE TABLE IF NOT EXISTS ${this.table} (
           consumer_group text NOT NULL,
           target text NOT NULL,
           topic text NOT NULL,
           kpartition int NOT NULL,
           next_offset bigint NOT NULL,
           batch_first bigint NOT NULL,
           updated_at timestamptz NOT NULL DEFAULT now(),
           PRIMARY KEY (consumer_group, target, topic, kpartition))`,
      )
      .then(
        () => undefined,
        (error: unknown) => {
          // Two adapters creating it at the same moment: one of them gets a unique violation on
          // the catalog (23505) or "already exists" (42P07); the table is there either way.
          const code = (error as { code?: unknown }).code;
          if (code === '23505' || code === '42P07') return;
          this.ensured = undefined;
          throw error;
        },
      );
    return this.ensured;
  }

  /**
   * Inside the batch's transaction: moves every partition's stored next offset to the batch's,
   * where the stored one is at or below the batch's first offset. Returns undefined when every
   * partition moved; otherwise what is stored for the batch's partitions (the caller rolls back).
   */
  async claim(client: PoolClient, ranges: Ranges): Promise<StoredOffsets | undefined> {
    // One order for every writer, so that two transactions claiming the same partitions lock
    // their rows in the same order instead of deadlocking.
    const rs = [...ranges.values()].sort((a, b) =>
      a.topic === b.topic ? a.partition - b.partition : a.topic < b.topic ? -1 : 1,
    );
    const moved = await client.query(
      `INSERT INTO ${this.table} AS p (consumer_group, target, topic, kpartition, next_offset, batch_first)
       SELECT $1, $2, u.topic, u.kpartition, u.next_offset, u.batch_first
         FROM unnest($3::text[], $4::int[], $5::bigint[], $6::bigint[]) AS u(topic, kpartition, next_offset, batch_first)
       ON CONFLICT (consumer_group, target, topic, kpartition)
       DO UPDATE SET next_offset = EXCLUDED.next_offset, batch_first = EXCLUDED.batch_first, updated_at = now()
       WHERE p.next_offset <= EXCLUDED.batch_first
       RETURNING 1`,
      [
        this.group,
        this.target,
        rs.map((r) => r.topic),
        rs.map((r) => r.partition),
        rs.map((r) => r.next.toString()),
        rs.map((r) => r.first.toString()),
      ],
    );
    if (moved.rowCount === rs.length) return undefined;
    return this.select(client, rs);
  }

  /**
   * The stored next offsets of `partitions` (those with none stored are absent). With `settled`,
   * waits for a transaction still moving them (a COMMIT in flight) to end first, by asking for a
   * share lock on their rows.
   */
  async read(
    partitions: ReadonlyArray<{ topic: string; partition: number }>,
    settled = false,
  ): Promise<StoredOffsets> {
    await this.ensure(this.pool);
    return this.select(this.pool, partitions, settled);
  }

  private async select(
    on: PoolClient | Pool,
    partitions: ReadonlyArray<{ topic: string; partition: number }>,
    settled = false,
  ): Promise<StoredOffsets> {
    const { rows } = await on.query<{ topic: string; kpartition: number; next_offset: string }>(
      `SELECT topic, kpartition, next_offset::text AS next_offset FROM ${this.table}
        WHERE consumer_group = $1 AND target = $2
          AND (topic, kpartition) IN (SELECT * FROM unnest($3::text[], $4::int[]))${settled ? ' FOR SHARE' : ''}`,
      [this.group, this.target, partitions.map((p) => p.topic), partitions.map((p) => p.partition)],
    );
    return new Map(rows.map((r) => [partitionKey(r.topic, r.kpartition), BigInt(r.next_offset)]));
  }
}
