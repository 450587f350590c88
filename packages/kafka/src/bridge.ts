/**
 * The consumer bridge: runs a kafkajs consumer into one or more sinks and commits, per partition,
 * only offsets whose records are durable (or dead-lettered) in every sink they were routed to.
 */
import { EventEmitter } from 'node:events';
import {
  messageOf,
  type PendingCounts,
  ProgressTracker,
  type RecordMeta,
  ShutdownTimeoutError,
  Sink,
  type SinkEvents,
  StoreError,
} from '@spillway/core';
import type { Consumer, EachBatchPayload, KafkaMessage } from 'kafkajs';
import {
  type KafkaBridgeOptions,
  type ResolvedBridgeOptions,
  resolveBridgeOptions,
} from './bridge-options.js';
import { kafkaErrorType } from './classify.js';
import { CommitFence, isRebalanceError, isRejoinSignal, partitionKey } from './commits.js';
import {
  DecodeError,
  type DecodeFailure,
  decodeDeadLetterAdapter,
  type KafkaSource,
  undecodable,
} from './decode.js';

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

export interface BridgeSnapshot {
  name: string;
  state: BridgeState;
  /** Assignments seen (GROUP_JOIN events). */
  generation: number;
  partitions: PartitionSnapshot[];
  /** Messages taken from Kafka (redeliveries skipped are not counted). */
  messages: number;
  /** Messages dead-lettered because they could not be decoded or routed. */
  undecodable: number;
  /** Redelivered messages skipped because they were already taken. */
  skippedRedeliveries: number;
  commits: number;
  commitErrors: number;
  pauses: number;
  rebalances: number;
  /** Flush-and-commit rounds run because the group was rebalancing. */
  rebalanceFlushes: number;
  /** Rebalances where the buffered records were not all durable within `rebalanceFlushMs`. */
  rebalanceFlushTimeouts: number;
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

// Sinks of any record type: the bridge only calls tryWrite/flush/revoke and listens to events.
// biome-ignore lint/suspicious/noExplicitAny: a route may mix sinks of different record types
type AnySink = Sink<any>;

/**
 * The meta of a message the bridge took. Its private fields (never copied by spread, never in
 * JSON, so never in a dead-letter file) tie it to the partition ownership it was taken in.
 */
class MessageMeta implements RecordMeta {
  readonly topic: string;
  readonly partition: number;
  /** A bigint, so that the sinks' own progress tracking does not parse it again. */
  readonly offset: bigint;
  readonly eventTime?: number;
  /** `topic:partition`, the sinks' default ordering key, computed once per partition. */
  readonly key: string;
  readonly #owner: PartitionState;
  /** Kafka timestamp, or the time it was taken when the message has none. */
  readonly #ts: number;

  constructor(owner: PartitionState, offset: bigint, ts: number, now: number) {
    this.topic = owner.topic;
    this.partition = owner.partition;
    this.offset = offset;
    if (Number.isFinite(ts)) this.eventTime = ts;
    this.key = owner.key;
    this.#owner = owner;
    this.#ts = Number.isFinite(ts) ? ts : now;
  }

  static ownerOf(meta: RecordMeta): PartitionState | undefined {
    return #owner in meta ? (meta as MessageMeta).#owner : undefined;
  }

  get ts(): number {
    return this.#ts;
  }
}

interface Held {
  readonly record: unknown;
  readonly meta: RecordMeta;
  /** Sinks that have not taken the record yet. */
  sinks: AnySink[];
}

interface PartitionState {
  readonly topic: string;
  readonly partition: number;
  readonly key: string;
  /** Next offset to take; anything below was taken in this ownership (a redelivery). */
  next: bigint | undefined;
  /**
   * Messages taken but not yet accepted by every sink, oldest first: from the refused message to
   * the end of its batch. While there are any the partition is paused, so this never exceeds one
   * fetched batch (kafkajs' `maxBytesPerPartition`) per partition.
   */
  held: Held[] | undefined;
  heldHead: number;
  paused: boolean;
  lastMessageAt: number;
  lastSeen: bigint | undefined;
  highWatermark: bigint | undefined;
  /** Taken messages, oldest first, pruned past the commit point (for lag in seconds). */
  times: MessageMeta[];
  timesHead: number;
}

export interface StopOptions {
  /** Deadline for stop fetching → flush → commit → disconnect, ms. @default 25000 */
  timeoutMs?: number;
}

/**
 * Consumes topics with kafkajs, decodes each message, routes the record to one or more sinks,
 * and commits per partition the offset after the last message whose records are all durable or
 * dead-lettered. Full sinks pause their partitions; rebalances flush and commit first; shutdown
 * stops fetching, flushes, commits and disconnects.
 */
export class KafkaBridge<R> {
  readonly name: string;
  private readonly o: ResolvedBridgeOptions<R>;
  private readonly consumer: Consumer;
  private readonly events = new EventEmitter();
  private readonly tracker = new ProgressTracker();
  private readonly fence = new CommitFence();
  private readonly parts = new Map<string, PartitionState>();
  private readonly sinks = new Set<AnySink>();
  private readonly decodeSink: Sink<DecodeFailure>;
  private readonly running = new Set<Promise<void>>();
  private readonly unsubscribe: Array<() => void> = [];

  private stateValue: BridgeState = 'created';
  private draining = false;
  private memberId: string | undefined;
  private heldCount = 0;
  private retryScheduled = false;
  private commitTimer: NodeJS.Timeout | undefined;
  private commitChain: Promise<void> = Promise.resolve();
  private rejoinFlush: Promise<void> | undefined;
  private stopping: Promise<void> | undefined;
  private starting: Promise<void> | undefined;

  private counts = {
    messages: 0,
    undecodable: 0,
    skipped: 0,
    commits: 0,
    commitErrors: 0,
    pauses: 0,
    rebalances: 0,
    rebalanceFlushes: 0,
    rebalanceFlushTimeouts: 0,
  };

  constructor(options: KafkaBridgeOptions<R>) {
    this.o = resolveBridgeOptions(options);
    this.name = this.o.name;
    this.consumer = this.o.consumer;
    const maxPending = this.o.maxPendingDeadLetters;
    this.decodeSink = new Sink(
      decodeDeadLetterAdapter(this.o.deadLetter, this.name, () => Date.now()),
      {
        name: `${this.name}:undecodable`,
        maxRecords: Math.min(100, maxPending),
        maxPendingRecords: maxPending,
        maxAgeMs: 200,
        idleMs: 20,
      },
    );
    this.watch(this.decodeSink);
  }

  get state(): BridgeState {
    return this.stateValue;
  }

  // ---------------------------------------------------------------- lifecycle

  /** Connects, subscribes and starts consuming. Resolves once the consumer runs. */
  start(): Promise<void> {
    this.starting ??= this.doStart();
    return this.starting;
  }

  private async doStart(): Promise<void> {
    const c = this.consumer;
    this.unsubscribe.push(
      c.on(c.events.GROUP_JOIN, (e) => this.onGroupJoin(e.payload.memberId, e.payload.memberAssignment)),
      c.on(c.events.REBALANCING, () => {
        // No handler is running (all partitions idle or paused), so nothing can hold the group
        // open: flush and commit as best effort while kafkajs rejoins.
        if (this.running.size === 0 && !this.draining) void this.beforeRejoin();
      }),
      c.on(c.events.CRASH, (e) => this.onCrash(e.payload.error, e.payload.restart)),
    );
    await c.connect();
    await c.subscribe({ topics: [...this.o.topics], fromBeginning: this.o.fromBeginning });
    await c.run({
      autoCommit: false,
      eachBatchAutoResolve: false,
      eachBatch: (payload) => this.onBatch(payload),
    });
    this.stateValue = 'running';
    this.commitTimer = setInterval(() => {
      this.commit().catch(() => undefined);
    }, this.o.commitIntervalMs);
    this.commitTimer.unref();
    const sd = this.o.shutdown;
    if (sd) {
      this.unsubscribe.push(
        sd.add('sources', `${this.name}: stop fetching`, () => this.stopFetching()),
        sd.add(
          'sinks',
          `${this.name}: flush`,
          ({ remainingMs }) => this.flushAll(remainingMs),
          () => this.pending(),
        ),
        sd.add('progress', `${this.name}: commit`, () => this.commit()),
        sd.add('clients', `${this.name}: disconnect`, () => this.disconnect()),
      );
    }
  }

  /**
   * Stops fetching, flushes the sinks, commits the durable offsets and disconnects, within
   * `timeoutMs`. Records still not durable at the deadline are not committed (the next owner
   * reads them again) and the promise rejects with `SPILLWAY_SHUTDOWN_TIMEOUT`.
   */
  stop(options: StopOptions = {}): Promise<void> {
    this.stopping ??= this.doStop(options.timeoutMs ?? 25_000);
    return this.stopping;
  }

  private async doStop(timeoutMs: number): Promise<void> {
    const deadline = Date.now() + timeoutMs;
    const left = () => Math.max(1, deadline - Date.now());
    await this.stopFetching();
    let late: unknown;
    try {
      await this.flushAll(left());
    } catch (error) {
      late = error;
    }
    await this.commit().catch((error: unknown) => {
      late ??= error;
    });
    await this.disconnect();
    if (late) throw late;
  }

  /** Shutdown step 1: no more messages are taken; waits for a running handler to return. */
  async stopFetching(): Promise<void> {
    if (this.stateValue !== 'failed') this.stateValue = 'stopping';
    this.draining = true;
    if (this.commitTimer) clearInterval(this.commitTimer);
    this.commitTimer = undefined;
    for (const st of this.parts.values()) this.pauseKafka(st);
    await Promise.allSettled([...this.running]);
  }

  /**
   * Shutdown step 2: flushes every sink the bridge wrote to and waits for their records to be
   * terminal, at most `timeoutMs`. Held messages (a sink was full) are not written: they are not
   * committed either.
   */
  async flushAll(timeoutMs: number): Promise<void> {
    const all = Promise.all(
      [...this.sinks].map((s) =>
        s.state === 'open' || s.state === 'closing' ? s.flush() : Promise.resolve(),
      ),
    ).then(() => undefined);
    await within(
      all,
      timeoutMs,
      () => new ShutdownTimeoutError(`flush of bridge "${this.name}"`, timeoutMs, this.pending()),
    );
    await this.decodeSink.close({ timeoutMs }).catch(() => undefined);
  }

  /** Shutdown step 4: leaves the group and closes the sockets. */
  async disconnect(): Promise<void> {
    if (this.commitTimer) clearInterval(this.commitTimer);
    this.commitTimer = undefined;
    try {
      await this.consumer.disconnect();
    } finally {
      for (const off of this.unsubscribe.splice(0)) off();
      for (const s of this.sinks) {
        s.off('settled', this.onSettled);
        s.off('error', this.onSinkError);
      }
      if (this.stateValue !== 'failed') this.stateValue = 'stopped';
      this.fence.revokeAll();
    }
  }

  /** Records of this bridge's sinks not yet terminal. */
  pending(): PendingCounts {
    const p = { buffered: 0, inFlight: 0, retrying: 0 };
    for (const s of this.sinks) {
      const q = s.pending();
      p.buffered += q.buffered;
      p.inFlight += q.inFlight;
      p.retrying += q.retrying;
    }
    return p;
  }

  // ---------------------------------------------------------------- consuming

  private async onBatch(payload: EachBatchPayload): Promise<void> {
    const run = this.handleBatch(payload);
    this.running.add(run);
    try {
      await run;
    } finally {
      this.running.delete(run);
    }
  }

  private async handleBatch({
    batch,
    resolveOffset,
    heartbeat,
    isRunning,
    isStale,
  }: EachBatchPayload): Promise<void> {
    const st = this.partitionFor(batch.topic, batch.partition);
    if (st && !this.draining && this.stateValue === 'running') {
      st.highWatermark = BigInt(batch.highWatermark);
      // With held messages the partition is paused: a batch fetched before the pause is left
      // unresolved, so kafkajs fetches it again after resume.
      if (st.held === undefined) this.take(st, batch.messages, resolveOffset, isRunning, isStale);
    }
    try {
      await heartbeat();
    } catch (error) {
      // The group is rebalancing and waits for this member's join: flush and commit now, so the
      // partitions move with their progress, then let kafkajs rejoin (it checks the error's type).
      if (isRejoinSignal(error) && !this.draining) await this.beforeRejoin();
      throw error;
    }
  }

  private take(
    st: PartitionState,
    messages: KafkaMessage[],
    resolveOffset: (offset: string) => void,
    isRunning: () => boolean,
    isStale: () => boolean,
  ): void {
    // The loop is synchronous: nothing can stop the consumer or make the batch stale inside it.
    if (!isRunning() || isStale()) return;
    const source: KafkaSource = { topic: st.topic, partition: st.partition };
    const now = Date.now();
    let last: string | undefined;
    for (const m of messages) {
      if (this.stateValue !== 'running') break;
      const offset = BigInt(m.offset);
      // Taken (or skipped): kafkajs fetches after it from now on, whether or not every sink had room.
      last = m.offset;
      if (st.next !== undefined && offset < st.next) {
        // Redelivered after a rejoin: already taken (and buffered, in flight, or durable).
        this.counts.skipped++;
        continue;
      }
      const meta = new MessageMeta(st, offset, Number(m.timestamp), now);
      this.decodeAndRoute(m, source);
      const record = this.routedRecord;
      const sinks = this.routedSinks;
      this.tracker.track(st.key, offset, sinks.length);
      st.next = offset + 1n;
      st.lastSeen = offset;
      st.lastMessageAt = now;
      st.times.push(meta);
      if ((st.times.length & 1023) === 0) this.prune(st);
      this.counts.messages++;
      if (st.held) {
        // Behind a refused message: keep the rest of this batch (already fetched and decoded by
        // kafkajs) instead of fetching it again after the resume.
        st.held.push({ record, meta, sinks });
        continue;
      }
      const rest = this.offer(record, meta, sinks);
      if (rest.length > 0) {
        st.held = [{ record, meta, sinks: rest }];
        st.heldHead = 0;
        this.heldCount++;
        this.pauseKafka(st);
        this.counts.pauses++;
        this.emit('pause', { topic: st.topic, partition: st.partition, sink: rest[0]!.name });
      }
    }
    // Once per batch: resolving is only a note of the next offset to fetch.
    if (last !== undefined) resolveOffset(last);
  }

  // decodeAndRoute() leaves its result here rather than in a new object per message.
  private routedRecord: unknown;
  private routedSinks: AnySink[] = NO_SINKS;

  /** Decodes and routes one message into `routedRecord` / `routedSinks`. */
  private decodeAndRoute(m: KafkaMessage, source: KafkaSource): void {
    let failure: DecodeError;
    let record: R | DecodeError;
    try {
      record = this.o.decode(m, source);
    } catch (error) {
      record =
        error instanceof DecodeError
          ? error
          : new DecodeError(`decoder threw: ${messageOf(error)}`, { cause: error });
    }
    if (!(record instanceof DecodeError)) {
      try {
        const route = this.o.route(record, source);
        this.routedRecord = record;
        if (route == null) {
          this.routedSinks = NO_SINKS;
          return;
        }
        const list = (Array.isArray(route) ? route : [route]) as AnySink[];
        for (const sink of list) this.watch(sink);
        // The bridge never mutates a route list, so the router's own array can be used as is.
        this.routedSinks = hasDuplicates(list) ? [...new Set(list)] : list;
        return;
      } catch (error) {
        failure = new DecodeError(`route() threw: ${messageOf(error)}`, { cause: error });
      }
    } else failure = record;
    this.counts.undecodable++;
    const letter: DecodeFailure = { message: undecodable(m, source), error: failure };
    this.routedRecord = letter;
    this.routedSinks = [this.decodeSink];
  }

  /** Writes to each sink in turn; returns the sinks that had no room (the first of them and after). */
  private offer(record: unknown, meta: RecordMeta, sinks: AnySink[]): AnySink[] {
    for (let i = 0; i < sinks.length; i++) {
      const sink = sinks[i]!;
      let taken: boolean;
      try {
        taken = sink.tryWrite(record, meta);
      } catch (error) {
        // A failed or closed sink: its partitions stop here and are never committed past.
        this.fail(error);
        return sinks.slice(i);
      }
      if (!taken) return sinks.slice(i);
    }
    return [];
  }

  private watch(sink: AnySink): void {
    if (this.sinks.has(sink)) return;
    // Duck-typed, so that two copies of @spillway/core in one app still work together.
    const s = sink as Partial<AnySink> | null;
    if (
      !s ||
      typeof s.tryWrite !== 'function' ||
      typeof s.on !== 'function' ||
      typeof s.revoke !== 'function'
    ) {
      throw new TypeError(`Expected \`route\` to return Spillway sinks, got \`${String(sink)}\``);
    }
    this.sinks.add(sink);
    sink.on('settled', this.onSettled);
    sink.on('error', this.onSinkError);
  }

  private readonly onSettled = (e: SinkEvents['settled']): void => {
    for (const meta of e.metas) {
      if (meta === undefined) continue;
      const st = MessageMeta.ownerOf(meta);
      // Not ours, or from a partition this member no longer owns (or owns anew).
      if (st === undefined || this.parts.get(st.key) !== st) continue;
      this.tracker.complete(st.key, (meta as MessageMeta).offset, 1);
    }
    if (this.heldCount > 0) this.scheduleRetry();
  };

  private readonly onSinkError = (e: SinkEvents['error']): void => {
    this.fail(e.error);
  };

  /** Room may have freed up: offer held messages again (outside the sink's own call stack). */
  private scheduleRetry(): void {
    if (this.retryScheduled) return;
    this.retryScheduled = true;
    setImmediate(() => {
      this.retryScheduled = false;
      if (this.draining || this.stateValue !== 'running') return;
      for (const st of this.parts.values()) {
        const held = st.held;
        if (!held) continue;
        while (st.heldHead < held.length) {
          const h = held[st.heldHead]!;
          h.sinks = this.offer(h.record, h.meta, h.sinks);
          if (h.sinks.length > 0) break;
          held[st.heldHead++] = undefined as never; // let the record go
        }
        if (st.heldHead === held.length) {
          st.held = undefined;
          st.heldHead = 0;
          this.heldCount--;
          this.resumeKafka(st);
          this.emit('resume', { topic: st.topic, partition: st.partition });
        }
      }
    });
  }

  private pauseKafka(st: PartitionState): void {
    st.paused = true;
    this.consumer.pause([{ topic: st.topic, partitions: [st.partition] }]);
  }

  private resumeKafka(st: PartitionState): void {
    if (this.draining) return;
    st.paused = false;
    this.consumer.resume([{ topic: st.topic, partitions: [st.partition] }]);
  }

  private partitionFor(topic: string, partition: number): PartitionState | undefined {
    const key = partitionKey(topic, partition);
    const st = this.parts.get(key);
    if (st) return st;
    // A batch of a partition outside the latest assignment is stale: leave it alone.
    if (!this.fence.owns(key)) return undefined;
    return this.newPartition(topic, partition);
  }

  private newPartition(topic: string, partition: number): PartitionState {
    const key = partitionKey(topic, partition);
    const st: PartitionState = {
      topic,
      partition,
      key,
      next: undefined,
      held: undefined,
      heldHead: 0,
      paused: false,
      lastMessageAt: Date.now(),
      lastSeen: undefined,
      highWatermark: undefined,
      times: [],
      timesHead: 0,
    };
    this.parts.set(key, st);
    return st;
  }

  private dropPartition(st: PartitionState): void {
    if (st.held) this.heldCount--;
    st.held = undefined;
    this.parts.delete(st.key);
    this.tracker.forget(st.key);
  }

  // ---------------------------------------------------------------- rebalances

  private onGroupJoin(memberId: string, assignment: Record<string, number[]>): void {
    this.counts.rebalances++;
    // A new member id means this member was expelled and joined afresh: partitions it "kept" may
    // have been read and committed by another member meanwhile. Start them over from the broker.
    if (this.memberId !== undefined && memberId !== this.memberId)
      for (const st of [...this.parts.values()]) this.dropPartition(st);
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
        this.dropPartition(st);
      }
    }
    this.fence.assign(keys.keys());
    // Pause flags survive a rejoin: make them match what the bridge wants.
    const paused = new Set<string>();
    for (const t of this.consumer.paused())
      for (const p of t.partitions) paused.add(partitionKey(t.topic, p));
    for (const [key, tp] of keys) {
      const st = this.parts.get(key) ?? this.newPartition(tp.topic, tp.partition);
      const want = this.draining || st.held !== undefined;
      if (want) this.pauseKafka(st);
      else if (paused.has(key) || st.paused) {
        st.paused = false;
        this.consumer.resume([{ topic: tp.topic, partitions: [tp.partition] }]);
      }
    }
    this.emit('assign', { assigned: [...keys.keys()], revoked, kept, generation: this.fence.generation });
  }

  private onCrash(error: unknown, restart: boolean): void {
    // kafkajs restarts the consumer (or gives up): whatever this member owned is gone.
    for (const st of [...this.parts.values()]) this.dropPartition(st);
    this.fence.revokeAll();
    if (!restart) this.fail(error);
  }

  /**
   * Flushes this bridge's records in every sink (reason `revoke`) for at most `rebalanceFlushMs`,
   * then commits what is durable.
   */
  private beforeRejoin(): Promise<void> {
    this.rejoinFlush ??= (async () => {
      this.counts.rebalanceFlushes++;
      try {
        const ours = (meta: RecordMeta | undefined) =>
          meta !== undefined && MessageMeta.ownerOf(meta) !== undefined;
        const flushed = Promise.all(
          [...this.sinks].filter((s) => s.state === 'open').map((s) => s.revoke(ours)),
        ).then(() => true);
        const ok = await within(flushed, this.o.rebalanceFlushMs, () => undefined).catch(() => false);
        if (!ok) this.counts.rebalanceFlushTimeouts++;
        await this.commit().catch(() => undefined);
      } finally {
        this.rejoinFlush = undefined;
      }
    })();
    return this.rejoinFlush;
  }

  // ---------------------------------------------------------------- commits

  /**
   * Commits, for every owned partition, the offset after the last message whose records are all
   * durable or dead-lettered. Commits are serialised; a commit refused because the group is
   * rebalancing resolves (the next owner reads those messages again); other failures reject.
   */
  commit(): Promise<void> {
    const run = this.commitChain.then(() => this.commitNow());
    this.commitChain = run.catch(() => undefined);
    return run;
  }

  private async commitNow(): Promise<void> {
    if (this.stateValue === 'created' || this.stateValue === 'stopped') return;
    const points: Array<{ topic: string; partition: number; offset: bigint }> = [];
    for (const st of this.parts.values()) {
      const offset = this.tracker.committable(st.key);
      if (offset !== undefined) points.push({ topic: st.topic, partition: st.partition, offset });
      this.prune(st);
    }
    const plan = this.fence.plan(points);
    if (plan.offsets.length === 0) return;
    const offsets = plan.offsets.map((p) => ({
      topic: p.topic,
      partition: p.partition,
      offset: p.offset.toString(),
    }));
    try {
      await this.consumer.commitOffsets(offsets);
    } catch (error) {
      this.counts.commitErrors++;
      if (isRebalanceError(error)) return;
      const wrapped = new StoreError(
        `Commit of ${offsets.length} partition offset(s) failed: ${messageOf(error)}`,
        {
          cause: error,
          driverCode: kafkaErrorType(error),
        },
      );
      this.emit('error', { error: wrapped, fatal: false });
      throw wrapped;
    }
    this.fence.accepted(plan);
    this.counts.commits++;
    this.emit('commit', { offsets });
  }

  // ---------------------------------------------------------------- failure, metrics, events

  private fail(error: unknown): void {
    if (this.stateValue === 'failed') return;
    this.stateValue = 'failed';
    // Committing stays correct (a failed sink never settles its records); taking more does not.
    for (const st of this.parts.values()) this.pauseKafka(st);
    this.emit('error', { error, fatal: true });
  }

  /** Drops lag timestamps of offsets the commit point has passed. */
  private prune(st: PartitionState): void {
    const point = this.tracker.committable(st.key);
    if (point === undefined) return;
    while (st.timesHead < st.times.length && st.times[st.timesHead]!.offset < point) st.timesHead++;
    if (st.timesHead > 1024 && st.timesHead * 2 > st.times.length) {
      st.times = st.times.slice(st.timesHead);
      st.timesHead = 0;
    }
  }

  snapshot(): BridgeSnapshot {
    const now = Date.now();
    const partitions: PartitionSnapshot[] = [];
    for (const st of this.parts.values()) {
      this.prune(st);
      const durable = this.tracker.committable(st.key);
      const committed = this.fence.lastCommitted(st.key);
      const oldest = st.timesHead < st.times.length ? st.times[st.timesHead] : undefined;
      const base = durable ?? oldest?.offset ?? (st.lastSeen === undefined ? undefined : st.lastSeen + 1n);
      const lag =
        st.highWatermark !== undefined && base !== undefined && st.highWatermark > base
          ? Number(st.highWatermark - base)
          : 0;
      partitions.push({
        topic: st.topic,
        partition: st.partition,
        committed: committed?.toString(),
        durable: durable?.toString(),
        lastSeen: st.lastSeen?.toString(),
        highWatermark: st.highWatermark?.toString(),
        lagMessages: lag,
        lagSeconds: oldest === undefined ? 0 : Math.max(0, (now - oldest.ts) / 1000),
        idleMs: now - st.lastMessageAt,
        paused: st.paused,
        pendingMessages: this.tracker.pending(st.key),
        heldMessages: st.held ? st.held.length - st.heldHead : 0,
      });
    }
    partitions.sort((a, b) => (a.topic === b.topic ? a.partition - b.partition : a.topic < b.topic ? -1 : 1));
    const c = this.counts;
    return {
      name: this.name,
      state: this.stateValue,
      generation: this.fence.generation,
      partitions,
      messages: c.messages,
      undecodable: c.undecodable,
      skippedRedeliveries: c.skipped,
      commits: c.commits,
      commitErrors: c.commitErrors,
      pauses: c.pauses,
      rebalances: c.rebalances,
      rebalanceFlushes: c.rebalanceFlushes,
      rebalanceFlushTimeouts: c.rebalanceFlushTimeouts,
    };
  }

  on<E extends BridgeEventName>(event: E, listener: (payload: BridgeEvents[E]) => void): this {
    this.events.on(event, listener as (p: unknown) => void);
    return this;
  }

  off<E extends BridgeEventName>(event: E, listener: (payload: BridgeEvents[E]) => void): this {
    this.events.off(event, listener as (p: unknown) => void);
    return this;
  }

  private emit<E extends BridgeEventName>(event: E, payload: BridgeEvents[E]): void {
    if (event === 'error' && this.events.listenerCount('error') === 0) return;
    this.events.emit(event, payload);
  }
}

const NO_SINKS: AnySink[] = [];

function hasDuplicates(list: readonly AnySink[]): boolean {
  for (let i = 1; i < list.length; i++) for (let j = 0; j < i; j++) if (list[i] === list[j]) return true;
  return false;
}

/** Resolves as `work` does, or with `onTimeout()`'s value / rejection when `ms` passes first. */
function within<T>(work: Promise<T>, ms: number, onTimeout: () => Error | undefined): Promise<T | undefined> {
  return new Promise<T | undefined>((resolve, reject) => {
    const t = setTimeout(() => {
      const e = onTimeout();
      if (e) reject(e);
      else resolve(undefined);
    }, ms);
    work.then(
      (v) => {
        clearTimeout(t);
        resolve(v);
      },
      (e: unknown) => {
        clearTimeout(t);
        reject(e);
      },
    );
  });
}
