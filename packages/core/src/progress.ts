/**
 * Per-partition durable progress. Offsets are tracked in the order they were received; the commit
 * point advances only over a contiguous prefix of finished offsets, so batches that finish out of
 * order never move it past an unfinished record. O(1) amortised per offset when records finish
 * in order, O(log n) for one that finishes ahead of n unfinished ones.
 */

interface Slot {
  offset: bigint;
  /** Records of this offset not yet terminal (one message may feed several records or sinks). */
  open: number;
}

class PartitionProgress {
  private queue: Slot[] = [];
  private head = 0;
  /** Next offset to read: last finished contiguous offset + 1. */
  next: bigint | undefined;
  lastTracked: bigint | undefined;

  /** False (and nothing tracked) when `offset` is not after the last one: a redelivery. */
  track(offset: bigint, count: number): boolean {
    const last = this.queue.length > this.head ? this.queue[this.queue.length - 1] : undefined;
    if (last && last.offset === offset) {
      last.open += count;
      return true;
    }
    if (this.lastTracked !== undefined && offset <= this.lastTracked) return false;
    this.lastTracked = offset;
    if (count === 0) {
      // Nothing to wait for: done at once, but only after every earlier offset.
      const slot = { offset, open: 0 };
      this.queue.push(slot);
      this.advance();
      return true;
    }
    const slot = { offset, open: count };
    this.queue.push(slot);
    return true;
  }

  complete(offset: bigint, count: number): void {
    const slot = this.find(offset);
    if (!slot) return;
    slot.open -= count;
    if (slot.open <= 0) this.advance();
  }

  /**
   * The unfinished slot of `offset`. The queue holds strictly increasing offsets, so no map is
   * needed (a per-record Map insert, lookup and delete cost more than this search): completions
   * mostly come in order and hit the oldest slot; others are found by binary search.
   */
  private find(offset: bigint): Slot | undefined {
    const q = this.queue;
    let lo = this.head;
    let hi = q.length - 1;
    if (lo > hi) return undefined;
    if (q[lo]!.offset === offset) return q[lo];
    while (lo <= hi) {
      const mid = (lo + hi) >>> 1;
      const slot = q[mid]!;
      if (slot.offset === offset) return slot;
      if (slot.offset < offset) lo = mid + 1;
      else hi = mid - 1;
    }
    return undefined;
  }

  private advance(): void {
    while (this.head < this.queue.length) {
      const slot = this.queue[this.head]!;
      if (slot.open > 0) break;
      this.next = slot.offset + 1n;
      this.head++;
    }
    if (this.head > 1024 && this.head * 2 > this.queue.length) {
      this.queue = this.queue.slice(this.head);
      this.head = 0;
    }
  }

  get pendingOffsets(): number {
    return this.queue.length - this.head;
  }

  /** Oldest offset not yet finished, if any. */
  get oldestOpen(): bigint | undefined {
    return this.head < this.queue.length ? this.queue[this.head]!.offset : undefined;
  }
}

/**
 * The one key of a source partition, "topic:partition" (or the partition alone when the source has
 * no topics): progress, ordering and the bridge's bookkeeping all name a partition this way.
 */
export function partitionKey(topic: string | undefined, partition: number | string | undefined): string {
  return topic === undefined ? String(partition ?? '') : `${topic}:${partition ?? ''}`;
}

/** An offset as a bigint (Kafka hands them over as strings). */
export function toOffset(offset: string | number | bigint): bigint {
  return typeof offset === 'bigint' ? offset : BigInt(offset);
}

export class ProgressTracker {
  private parts = new Map<string, PartitionProgress>();

  private part(key: string): PartitionProgress {
    let p = this.parts.get(key);
    if (!p) {
      p = new PartitionProgress();
      this.parts.set(key, p);
    }
    return p;
  }

  /**
   * Registers `count` records (default 1) at `offset`. Offsets must increase per key; an offset at
   * or below the last one tracked (a redelivery) is not tracked and the call returns false.
   */
  track(key: string, offset: string | number | bigint, count = 1): boolean {
    return this.part(key).track(toOffset(offset), count);
  }

  /** Marks `count` records at `offset` terminal (durable or dead-lettered). */
  complete(key: string, offset: string | number | bigint, count = 1): void {
    this.parts.get(key)?.complete(toOffset(offset), count);
  }

  /** The next offset to read for `key` (last contiguous terminal + 1), or undefined if none yet. */
  committable(key: string): bigint | undefined {
    return this.parts.get(key)?.next;
  }

  /** The last offset tracked for `key`. */
  lastTracked(key: string): bigint | undefined {
    return this.parts.get(key)?.lastTracked;
  }

  /** Offsets tracked but not yet terminal for `key`. */
  pending(key: string): number {
    return this.parts.get(key)?.pendingOffsets ?? 0;
  }

  oldestOpen(key: string): bigint | undefined {
    return this.parts.get(key)?.oldestOpen;
  }

  /** Every key with its commit point. */
  *points(): IterableIterator<[string, bigint]> {
    for (const [key, p] of this.parts) if (p.next !== undefined) yield [key, p.next];
  }

  keys(): IterableIterator<string> {
    return this.parts.keys();
  }

  /** Forgets a key (a revoked partition); its next owner starts from the broker's offset. */
  forget(key: string): void {
    this.parts.delete(key);
  }
}
