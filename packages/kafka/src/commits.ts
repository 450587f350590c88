/**
 * Commit fencing. Neither kafkajs nor the broker checks that a member still owns the partition
 * it commits for: a late commit for a partition that moved is accepted while the group is stable
 * and can move the new owner's offset backwards. The fence lets a commit through only for a
 * partition in this member's latest assignment, only forwards, and only from the generation it
 * was planned in.
 */
import { messageOf, StoreError } from '@spillway/core';
import { partitionKey } from '@spillway/core/kit';
import type { Consumer } from 'kafkajs';
import type { BridgeControl } from './bridge-types.js';
import { kafkaErrorType } from './classify.js';
import type { PartitionState } from './partition.js';

export interface PlannedCommit {
  readonly generation: number;
  readonly offsets: ReadonlyArray<{ topic: string; partition: number; offset: bigint }>;
}

export class CommitFence {
  /** Bumped on every assignment (GROUP_JOIN) and on a consumer crash. */
  private gen = 0;
  private owned = new Set<string>();
  /** The highest offset this member committed per partition, in the current ownership. */
  private readonly committed = new Map<string, bigint>();

  get generation(): number {
    return this.gen;
  }

  owns(key: string): boolean {
    return this.owned.has(key);
  }

  /** A new assignment: partitions no longer owned lose their committed mark. */
  assign(keys: Iterable<string>): void {
    this.gen++;
    const next = new Set(keys);
    for (const key of this.committed.keys()) if (!next.has(key)) this.committed.delete(key);
    this.owned = next;
  }

  /** Nothing is owned (the consumer crashed or stopped). */
  revokeAll(): void {
    this.assign([]);
  }

  lastCommitted(key: string): bigint | undefined {
    return this.committed.get(key);
  }

  /** Keeps the points that are owned and ahead of what was already committed. */
  plan(points: Iterable<{ topic: string; partition: number; offset: bigint }>): PlannedCommit {
    const offsets: Array<{ topic: string; partition: number; offset: bigint }> = [];
    for (const p of points) {
      const key = partitionKey(p.topic, p.partition);
      if (!this.owned.has(key)) continue;
      const last = this.committed.get(key);
      if (last !== undefined && p.offset <= last) continue;
      offsets.push(p);
    }
    return { generation: this.gen, offsets };
  }

  /** Whether a planned commit may still be sent: no rebalance happened since it was planned. */
  current(plan: PlannedCommit): boolean {
    return plan.generation === this.gen;
  }

  /** Records a commit the broker accepted. */
  accepted(plan: PlannedCommit): void {
    if (plan.generation !== this.gen) return;
    for (const p of plan.offsets) {
      const key = partitionKey(p.topic, p.partition);
      const last = this.committed.get(key);
      if (this.owned.has(key) && (last === undefined || p.offset > last)) this.committed.set(key, p.offset);
    }
  }
}

/** Kafka error types that mean "the group is rebalancing / this member must rejoin". */
const REBALANCE_TYPES = new Set([
  'REBALANCE_IN_PROGRESS',
  'ILLEGAL_GENERATION',
  'UNKNOWN_MEMBER_ID',
  'NOT_COORDINATOR_FOR_GROUP',
  'FENCED_INSTANCE_ID',
]);

export function isRebalanceError(error: unknown): boolean {
  const type = kafkaErrorType(error);
  return type !== undefined && REBALANCE_TYPES.has(type);
}

/**
 * A rebalance signal from `heartbeat()` worth holding the group for: the member is still in the
 * current generation, so a commit sent now is accepted before the partitions move.
 */
export function isRejoinSignal(error: unknown): boolean {
  const type = (error as { type?: unknown } | null)?.type;
  return type === 'REBALANCE_IN_PROGRESS' || type === 'NOT_COORDINATOR_FOR_GROUP';
}

/**
 * Commits, for every owned partition, the offset after the last message whose records are all
 * durable or dead-lettered. Commits are serialised; a commit refused because the group is
 * rebalancing resolves (the next owner reads those messages again); other failures reject.
 */
export class Committer {
  private readonly consumer: Consumer;
  private readonly fence: CommitFence;
  private readonly parts: ReadonlyMap<string, PartitionState>;
  private readonly control: BridgeControl;
  /** Whether there is a consumer to commit with (started and not yet disconnected). */
  private readonly connected: () => boolean;
  private chain: Promise<void> = Promise.resolve();

  constructor(
    consumer: Consumer,
    fence: CommitFence,
    parts: ReadonlyMap<string, PartitionState>,
    control: BridgeControl,
    connected: () => boolean,
  ) {
    this.consumer = consumer;
    this.fence = fence;
    this.parts = parts;
    this.control = control;
    this.connected = connected;
  }

  commit(): Promise<void> {
    const run = this.chain.then(() => this.commitNow());
    this.chain = run.catch(() => undefined);
    return run;
  }

  private async commitNow(): Promise<void> {
    if (!this.connected()) return;
    const points: Array<{ topic: string; partition: number; offset: bigint }> = [];
    for (const st of this.parts.values()) {
      const offset = st.committable();
      if (offset !== undefined) points.push({ topic: st.topic, partition: st.partition, offset });
    }
    const plan = this.fence.plan(points);
    if (plan.offsets.length === 0) return;
    const offsets = plan.offsets.map((p) => ({
      topic: p.topic,
      partition: p.partition,
      offset: p.offset.toString(),
    }));
    const { counts } = this.control;
    try {
      await this.consumer.commitOffsets(offsets);
    } catch (error) {
      counts.commitErrors++;
      if (isRebalanceError(error)) return;
      const wrapped = new StoreError(
        `Commit of ${offsets.length} partition offset(s) failed: ${messageOf(error)}`,
        {
          cause: error,
          driverCode: kafkaErrorType(error),
        },
      );
      this.control.emit('error', { error: wrapped, fatal: false });
      throw wrapped;
    }
    this.fence.accepted(plan);
    counts.commits++;
    this.control.emit('commit', { offsets });
  }
}
