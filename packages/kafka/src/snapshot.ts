/** The bridge's snapshot: per partition progress and lag, and the bridge's counters. */
import type { BridgeCounts, BridgeSnapshot, BridgeState, PartitionSnapshot } from './bridge-types.js';
import type { CommitFence } from './commits.js';
import type { PartitionState } from './partition.js';

export function bridgeSnapshot(
  name: string,
  state: BridgeState,
  fence: CommitFence,
  parts: Iterable<PartitionState>,
  c: BridgeCounts,
): BridgeSnapshot {
  const now = Date.now();
  const partitions: PartitionSnapshot[] = [];
  for (const st of parts) partitions.push(partitionSnapshot(st, fence, now));
  partitions.sort((a, b) => (a.topic === b.topic ? a.partition - b.partition : a.topic < b.topic ? -1 : 1));
  return { name, state, generation: fence.generation, partitions, ...c };
}

function partitionSnapshot(st: PartitionState, fence: CommitFence, now: number): PartitionSnapshot {
  const durable = st.committable();
  const committed = fence.lastCommitted(st.key);
  const oldest = st.oldest;
  const base =
    durable ??
    (oldest === undefined
      ? st.lastSeen === undefined
        ? undefined
        : st.lastSeen + 1n
      : BigInt(oldest.offset));
  const lag =
    st.highWatermark !== undefined && base !== undefined && st.highWatermark > base
      ? Number(st.highWatermark - base)
      : 0;
  return {
    topic: st.topic,
    partition: st.partition,
    committed: committed?.toString(),
    durable: durable?.toString(),
    lastSeen: st.lastSeen?.toString(),
    highWatermark: st.highWatermark?.toString(),
    lagMessages: lag,
    lagSeconds: oldest === undefined ? 0 : Math.max(0, (now - st.oldestTime!) / 1000),
    idleMs: now - st.lastMessageAt,
    paused: st.paused,
    pendingMessages: st.pending,
    heldMessages: st.heldMessages,
  };
}
