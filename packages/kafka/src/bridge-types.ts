/**
 * The bridge's public shapes: its state, its snapshot and its event payloads.
 */

export type BridgeState = 'created' | 'running' | 'stopping' | 'stopped' | 'failed';

/** One partition as the bridge sees it. Offsets are strings (Kafka offsets are 64-bit). */
export interface PartitionSnapshot {
  topic: string;
  partition: number;
  /** The last offset this member committed (the next offset to read), if any. */
  committed: string | undefined;
  /** The durable commit point now: every message before it is durable or dead-lettered. */
  durable: string | undefined;
  /** The last offset received. */
  lastSeen: string | undefined;
  /** The partition's high watermark (the offset the next produced message gets), at the last fetch. */
  highWatermark: string | undefined;
  /** Messages between the durable commit point and the high watermark. */
  lagMessages: number;
  /** Age, by its Kafka timestamp, of the oldest received message that is not yet durable; 0 when none. */
  lagSeconds: number;
  /** Time since the last message arrived (or since the partition was assigned), ms. */
  idleMs: number;
  /** Paused by the bridge (a sink is full, or the bridge is stopping). */
  paused: boolean;
  /** Received messages not yet durable everywhere. */
  pendingMessages: number;
  /** Of those, messages taken from a batch but not yet accepted by every sink (the partition is paused). */
  heldMessages: number;
}

/** The bridge's counters: they only grow. */
export interface BridgeCounts {
  /** Messages taken from Kafka (redeliveries skipped are not counted). */
  messages: number;
  /** Messages dead-lettered because they could not be decoded or routed. */
  undecodable: number;
  /** Redelivered messages skipped because they were already taken. */
  skippedRedeliveries: number;
  /** Messages kept from at least one sink because that sink's stored offset was past them (`offsetStores`). */
  skippedStored: number;
  commits: number;
  commitErrors: number;
  pauses: number;
  rebalances: number;
  /** Flush-and-commit rounds run because the group was rebalancing. */
  rebalanceFlushes: number;
  /** Rebalances where the buffered records were not all durable within `rebalanceFlushMs`. */
  rebalanceFlushTimeouts: number;
  /**
   * Messages taken from a partition this member then lost (a rebalance, a crash of the consumer,
   * or the disconnect) beyond its last accepted commit. The partition's next owner reads them
   * again, so this bounds the duplicates an at-least-once sink can get from this member.
   */
  uncommittedAtRevoke: number;
}

export interface BridgeSnapshot extends BridgeCounts {
  name: string;
  state: BridgeState;
  /** Assignments seen (GROUP_JOIN events). */
  generation: number;
  partitions: PartitionSnapshot[];
}

/** Event payloads, by event name. */
export interface BridgeEvents {
  /** Offsets the broker accepted. `offset` is the next offset to read. */
  commit: { offsets: ReadonlyArray<{ topic: string; partition: number; offset: string }> };
  /** A new assignment (kept partitions appear in both `assigned` and `kept`). */
  assign: { assigned: string[]; revoked: string[]; kept: string[]; generation: number };
  /** A partition paused because a sink had no room, or resumed. */
  pause: { topic: string; partition: number; sink: string };
  resume: { topic: string; partition: number };
  /** A commit failed (`fatal: false`), or a sink the bridge writes to failed (`fatal: true`). */
  error: { error: unknown; fatal: boolean };
}
export type BridgeEventName = keyof BridgeEvents;

export interface StopOptions {
  /** Deadline for stop fetching → flush → commit → disconnect, ms. @default 25000 */
  timeoutMs?: number;
}

/** What the bridge's parts share with the facade that wires them. */
export interface BridgeControl {
  readonly counts: BridgeCounts;
  /** Running and not stopping: messages may be taken and handed to sinks. */
  accepting(): boolean;
  /** Stopping (or stopped): partitions stay paused. */
  draining(): boolean;
  /** Stopping, stopped or failed: nothing may resume a partition. */
  halted(): boolean;
  /** A sink the bridge writes to failed, or the consumer crashed for good. */
  fail(error: unknown): void;
  emit<E extends BridgeEventName>(event: E, payload: BridgeEvents[E]): void;
}
