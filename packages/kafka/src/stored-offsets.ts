/**
 * Exactly-once on assignment: before a newly owned partition is taken, the offsets each sink of
 * `offsetStores` stored with its data are read, and become that sink's floor for the partition
 * (messages below it are not handed to that sink: it holds them already).
 */
import type { Assignment } from './assignment.js';
import type { OffsetStoreEntry } from './bridge-options.js';
import type { BridgeControl } from './bridge-types.js';
import type { AnySink, PartitionState } from './partition.js';

/** Backoff between failed reads of the stored offsets, ms (common practice: doubling, capped). */
const FIRST_RETRY_MS = 250;
const MAX_RETRY_MS = 5000;

export class StoredOffsetReader {
  private readonly stores: ReadonlyArray<OffsetStoreEntry>;
  private readonly group: string;
  private readonly control: BridgeControl;
  private assignment: Assignment | undefined;
  /** Partitions waiting for the next read (one read per store for all partitions of a join). */
  private waiting: PartitionState[] = [];
  /** For the assignment: called for every partition this member starts to own. */
  readonly fresh = (st: PartitionState): void => this.add(st);

  constructor(stores: ReadonlyArray<OffsetStoreEntry>, group: string, control: BridgeControl) {
    this.stores = stores;
    this.group = group;
    this.control = control;
  }

  /** The assignment whose partitions are resumed once read. */
  attach(assignment: Assignment): void {
    this.assignment = assignment;
  }

  /**
   * A newly owned partition: marked as loading (so it is paused and not taken) until the stored
   * offsets are read. Runs inside GROUP_JOIN, before kafkajs fetches: the pause is in place first.
   */
  private add(st: PartitionState): void {
    st.loading = true;
    this.assignment?.pause(st);
    this.waiting.push(st);
    if (this.waiting.length === 1) queueMicrotask(() => void this.read());
  }

  private async read(): Promise<void> {
    let parts = this.waiting.splice(0);
    for (let attempt = 0; ; attempt++) {
      parts = parts.filter((st) => st.live);
      if (parts.length === 0 || this.control.halted()) return;
      const coordinates = parts.map((st) => ({ topic: st.topic, partition: st.partition }));
      try {
        const found = await Promise.all(
          this.stores.map((e) => e.store.storedOffsets(this.group, coordinates)),
        );
        for (const st of parts) this.settle(st, found);
        return;
      } catch (error) {
        // A misconfiguration (the adapter stores offsets for another group, say) stops the bridge;
        // anything else (the store is unreachable) is retried while the partitions stay paused.
        if (error instanceof TypeError) {
          this.control.fail(error);
          return;
        }
        this.control.emit('error', { error, fatal: false });
        await new Promise((resolve) =>
          setTimeout(resolve, Math.min(MAX_RETRY_MS, FIRST_RETRY_MS * 2 ** attempt)),
        );
      }
    }
  }

  private settle(
    st: PartitionState,
    found: ReadonlyArray<ReadonlyArray<{ topic: string; partition: number; offset: string }>>,
  ): void {
    if (!st.live) return;
    const floors = new Map<AnySink, bigint>();
    for (let k = 0; k < this.stores.length; k++) {
      const hit = found[k]!.find((o) => o.topic === st.topic && o.partition === st.partition);
      if (hit !== undefined) floors.set(this.stores[k]!.sink, BigInt(hit.offset));
    }
    st.floors = floors.size > 0 ? floors : undefined;
    st.loading = false;
    if (!this.control.halted() && st.hold === undefined) this.assignment?.resume(st);
  }
}
