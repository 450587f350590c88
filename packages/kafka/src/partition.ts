/**
 * What the bridge keeps per owned partition: the messages taken and not yet durable everywhere
 * (oldest first: the commit point, the pending count and the lag in seconds all come from it),
 * and the messages of a batch still waiting for room in a sink.
 */
import type { RecordMeta, Sink } from '@spillway/core';
import { partitionKey } from '@spillway/core/kit';

// Sinks of any record type: the bridge only calls tryWriteMany/flush/revoke and listens to events.
// biome-ignore lint/suspicious/noExplicitAny: a route may mix sinks of different record types
export type AnySink = Sink<any>;

/**
 * The meta of a message the bridge took. Its private fields (never copied by spread, never in
 * JSON, so never in a dead-letter file) tie it to the partition ownership it was taken in and
 * count the sinks that have not yet made its record terminal: the meta is the message's progress
 * slot, so no second structure per message is needed.
 */
export class MessageMeta implements RecordMeta {
  readonly topic: string;
  readonly partition: number;
  /**
   * kafkajs' own decimal string, kept as it came: no number is made per message. The bridge turns
   * offsets into bigints once per chunk (and once per commit), never per message.
   */
  readonly offset: string;
  /** Always present (possibly undefined), so that every meta has one shape. */
  readonly eventTime: number | undefined;
  /** `topic:partition`, the sinks' default ordering key, computed once per partition. */
  readonly key: string;
  readonly #owner: PartitionState;
  /** Sinks the record was routed to that have not yet made it durable or dead-lettered it. */
  #open: number;

  /** `eventTime` is the message's Kafka timestamp, undefined when it has none. */
  constructor(owner: PartitionState, offset: string, eventTime: number | undefined, sinks: number) {
    this.topic = owner.topic;
    this.partition = owner.partition;
    this.offset = offset;
    this.eventTime = eventTime;
    this.key = owner.key;
    this.#owner = owner;
    this.#open = sinks;
  }

  /** The bridge keeps each message's progress itself: the sinks' own trackers skip it. */
  get externalProgress(): true {
    return true;
  }

  static ownerOf(meta: RecordMeta): PartitionState | undefined {
    return #owner in meta ? (meta as MessageMeta).#owner : undefined;
  }

  /**
   * One sink made this message's record terminal. Returns the partition whose commit point may
   * have moved (the message is now done everywhere), if it is still owned; the caller advances it.
   */
  static settle(meta: RecordMeta): PartitionState | undefined {
    if (!(#owner in meta)) return undefined;
    const m = meta as MessageMeta;
    if (--m.#open > 0) return undefined;
    const st = m.#owner;
    return st.live ? st : undefined;
  }

  static done(meta: MessageMeta): boolean {
    return meta.#open <= 0;
  }
}

/** A stretch of a held batch whose messages all go to the same sinks. */
export interface Run {
  readonly from: number;
  readonly to: number;
  readonly sinks: AnySink[];
  /** Per sink: the index of the first message that sink has not taken yet. */
  readonly cursors: number[];
}

/**
 * The messages of one batch from the first one some sink refused, decoded and routed, waiting
 * for room. Each sink of a run takes its messages in order; a run starts only once the one before
 * it is taken by all its sinks, so every sink sees a partition's records in offset order.
 */
export interface Hold {
  readonly records: unknown[];
  readonly metas: MessageMeta[];
  readonly runs: Run[];
  /** The first run not yet taken by all its sinks. */
  run: number;
}

const EMPTY: MessageMeta[] = [];

export class PartitionState {
  readonly topic: string;
  readonly partition: number;
  readonly key: string;
  /** False once the partition is revoked (or the member lost it): late settles are ignored. */
  live = true;
  /** Next offset to take; anything below was taken in this ownership (a redelivery). */
  next: bigint | undefined;
  /** The first offset taken in this ownership: the group's committed offset when it began. */
  firstTaken: bigint | undefined;
  /** While set the partition is paused, so this never exceeds one fetched batch per partition. */
  hold: Hold | undefined;
  paused = false;
  /** Waiting for the stored offsets of the sinks in `offsetStores` (the partition is paused). */
  loading = false;
  /** Per sink that stores offsets: its stored next offset; messages below it skip that sink. */
  floors: Map<AnySink, bigint> | undefined;
  lastMessageAt: number;
  lastSeen: bigint | undefined;
  highWatermark: bigint | undefined;
  /**
   * Taken messages not yet durable everywhere, in offset order, as the chunks they were taken in:
   * a chunk is the very array of metas handed to the sinks, so queueing costs nothing per message.
   * The oldest pending message is `chunks[first][at]`.
   */
  private chunks: MessageMeta[][] = [];
  /** When each chunk was taken (for messages without a timestamp): one reading per chunk. */
  private takenAt: number[] = [];
  private first = 0;
  private at = 0;
  private pendingCount = 0;
  /** The last message finished in offset order: the commit point is the offset after it. */
  private lastDone: MessageMeta | undefined;

  constructor(topic: string, partition: number, now: number) {
    this.topic = topic;
    this.partition = partition;
    this.key = partitionKey(topic, partition);
    this.lastMessageAt = now;
  }

  /** Queues a chunk of messages taken at `now`, in offset order, after every chunk queued before. */
  enqueue(metas: MessageMeta[], now: number): void {
    if (metas.length === 0) return;
    this.chunks.push(metas);
    this.takenAt.push(now);
    this.pendingCount += metas.length;
  }

  /** Moves the commit point over the finished messages at the front. O(1) amortised per message. */
  advance(): void {
    const chunks = this.chunks;
    let f = this.first;
    let i = this.at;
    let chunk = chunks[f];
    while (chunk !== undefined) {
      const from = i;
      while (i < chunk.length && MessageMeta.done(chunk[i]!)) i++;
      if (i > from) {
        this.lastDone = chunk[i - 1];
        this.pendingCount -= i - from;
      }
      if (i < chunk.length) break;
      // A finished chunk is let go of at once.
      chunks[f] = EMPTY;
      chunk = chunks[++f];
      i = 0;
    }
    if (f > 64 && f * 2 > chunks.length) {
      this.chunks = chunks.slice(f);
      this.takenAt = this.takenAt.slice(f);
      f = 0;
    }
    this.first = f;
    this.at = i;
  }

  /** The next offset to read: every message before it is durable or dead-lettered everywhere. */
  committable(): bigint | undefined {
    return this.lastDone === undefined ? undefined : BigInt(this.lastDone.offset) + 1n;
  }

  /** Taken messages not yet durable everywhere. */
  get pending(): number {
    return this.pendingCount;
  }

  /** The oldest taken message not yet durable everywhere. */
  get oldest(): MessageMeta | undefined {
    return this.chunks[this.first]?.[this.at];
  }

  /** The oldest pending message's Kafka timestamp, or when it was taken if it has none. */
  get oldestTime(): number | undefined {
    const oldest = this.oldest;
    return oldest === undefined ? undefined : (oldest.eventTime ?? this.takenAt[this.first]!);
  }

  /** Messages taken from a batch but not yet accepted by every sink. */
  get heldMessages(): number {
    const h = this.hold;
    if (!h) return 0;
    const run = h.runs[h.run];
    if (!run) return 0;
    let first = run.to;
    for (const c of run.cursors) if (c < first) first = c;
    return h.metas.length - first;
  }
}
