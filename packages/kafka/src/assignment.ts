/**
 * The partitions this member owns: their state, the commit fence, the pause flags kafkajs keeps,
 * and what an assignment (GROUP_JOIN) or a consumer crash changes.
 */

import { partitionKey } from '@spillway/core/kit';
import type { Consumer } from 'kafkajs';
import type { BridgeCounts, BridgeEvents } from './bridge-types.js';
import { CommitFence } from './commits.js';
import { type Hold, PartitionState } from './partition.js';

export class Assignment {
  readonly fence = new CommitFence();
  readonly parts = new Map<string, PartitionState>();
  private readonly consumer: Consumer;
  private readonly counts: BridgeCounts;
  /** Called for every partition this member starts to own (not for kept ones). */
  private readonly fresh: ((st: PartitionState) => void) | undefined;
  private memberId: string | undefined;
  /** Partitions with messages held for room in a sink. */
  private heldCount = 0;

  constructor(consumer: Consumer, counts: BridgeCounts, fresh?: (st: PartitionState) => void) {
    this.consumer = consumer;
    this.counts = counts;
    this.fresh = fresh;
  }

  get holding(): boolean {
    return this.heldCount > 0;
  }

  /** The state of a partition of a fetched batch; undefined when it is outside the latest assignment. */
  partitionFor(topic: string, partition: number): PartitionState | undefined {
    const key = partitionKey(topic, partition);
    const st = this.parts.get(key);
    if (st) return st;
    // A batch of a partition outside the latest assignment is stale: leave it alone.
    if (!this.fence.owns(key)) return undefined;
    return this.add(topic, partition);
  }

  hold(st: PartitionState, hold: Hold): void {
    if (st.hold === undefined) this.heldCount++;
    st.hold = hold;
  }

  release(st: PartitionState): void {
    if (st.hold !== undefined) this.heldCount--;
    st.hold = undefined;
  }

  pause(st: PartitionState): void {
    st.paused = true;
    this.consumer.pause([{ topic: st.topic, partitions: [st.partition] }]);
  }

  resume(st: PartitionState): void {
    st.paused = false;
    this.consumer.resume([{ topic: st.topic, partitions: [st.partition] }]);
  }

  pauseAll(): void {
    for (const st of this.parts.values()) this.pause(st);
  }

  /**
   * A new assignment from GROUP_JOIN: drops revoked partitions, adds new ones, and makes the pause
   * flags (which survive a rejoin) match what the bridge wants. Returns the `assign` event.
   */
  join(memberId: string, assignment: Record<string, number[]>, draining: boolean): BridgeEvents['assign'] {
    // A new member id means this member was expelled and joined afresh: partitions it "kept" may
    // have been read and committed by another member meanwhile. Start them over from the broker.
    if (this.memberId !== undefined && memberId !== this.memberId) this.dropAll();
    this.memberId = memberId;
    const keys = new Map<string, { topic: string; partition: number }>();
    for (const [topic, partitions] of Object.entries(assignment)) {
      for (const partition of partitions ?? [])
        keys.set(partitionKey(topic, partition), { topic, partition });
    }
    const revoked: string[] = [];
    const kept: string[] = [];
    for (const st of [...this.parts.values()]) {
      if (keys.has(st.key)) kept.push(st.key);
      else {
        revoked.push(st.key);
        this.drop(st);
      }
    }
    this.fence.assign(keys.keys());
    const paused = new Set<string>();
    for (const t of this.consumer.paused())
      for (const p of t.partitions) paused.add(partitionKey(t.topic, p));
    for (const [key, tp] of keys) {
      const st = this.parts.get(key) ?? this.add(tp.topic, tp.partition);
      if (draining || st.hold !== undefined || st.loading) this.pause(st);
      else if (paused.has(key) || st.paused) this.resume(st);
    }
    return { assigned: [...keys.keys()], revoked, kept, generation: this.fence.generation };
  }

  /** The consumer crashed (kafkajs restarts it, or gives up): whatever this member owned is gone. */
  crash(): void {
    this.dropAll();
    this.fence.revokeAll();
  }

  /** The consumer disconnected: it owns nothing, and what it took past its commits is counted. */
  revokeAll(): void {
    for (const st of this.parts.values()) this.countUncommitted(st);
    this.fence.revokeAll();
  }

  private add(topic: string, partition: number): PartitionState {
    const st = new PartitionState(topic, partition, Date.now());
    this.parts.set(st.key, st);
    this.fresh?.(st);
    return st;
  }

  private drop(st: PartitionState): void {
    this.countUncommitted(st);
    this.release(st);
    st.live = false;
    this.parts.delete(st.key);
  }

  /** Counts the messages of `st` taken past this member's last accepted commit (once per ownership). */
  private countUncommitted(st: PartitionState): void {
    const { next, firstTaken } = st;
    if (next === undefined || firstTaken === undefined || !this.fence.owns(st.key)) return;
    const from = this.fence.lastCommitted(st.key) ?? firstTaken;
    if (next > from) this.counts.uncommittedAtRevoke += Number(next - from);
  }

  private dropAll(): void {
    for (const st of [...this.parts.values()]) this.drop(st);
  }
}
