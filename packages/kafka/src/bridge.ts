/**
 * The consumer bridge: runs a kafkajs consumer into one or more sinks and commits, per partition,
 * only offsets whose records are durable (or dead-lettered) in every sink they were routed to.
 */
import { EventEmitter } from 'node:events';
import {
  messageOf,
  type PendingCounts,
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
import { type AnySink, type Hold, MessageMeta, PartitionState, type Run } from './partition.js';

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
  private readonly fence = new CommitFence();
  private readonly parts = new Map<string, PartitionState>();
  private readonly sinks = new Set<AnySink>();
  private readonly decodeSink: Sink<DecodeFailure>;
  private readonly decodeSinks: AnySink[];
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
    this.decodeSinks = [this.decodeSink];
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
      c.on(c.events.CRASH, (e) => this.onCrash(e.payload.error, e.payload.restart, e.payload.groupId)),
    );
    await c.connect();
    await c.subscribe({ topics: [...this.o.topics], fromBeginning: this.o.fromBeginning });
    await c.run({
      autoCommit: false,
      eachBatchAutoResolve: false,
      eachBatch: (payload) => this.onBatch(payload),
    });
    // The consumer can crash for good while run() joins the group (a refused group, say).
    if (this.stateValue === 'failed') throw this.fatal;
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
    for (const wake of [...this.roomWaiters]) wake();
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
    try {
      if (st && this.taking(st, isRunning, isStale)) {
        st.highWatermark = BigInt(batch.highWatermark);
        // With held messages the partition is paused: a batch fetched before the pause is left
        // unresolved, so kafkajs fetches it again after resume.
        if (st.hold === undefined)
          await this.take(st, batch.messages, resolveOffset, heartbeat, isRunning, isStale);
      }
      await heartbeat();
    } catch (error) {
      // The group is rebalancing and waits for this member's join: flush and commit now, so the
      // partitions move with their progress, then let kafkajs rejoin (it checks the error's type).
      if (isRejoinSignal(error) && !this.draining) await this.beforeRejoin();
      throw error;
    }
  }

  /** Whether messages of `st` may be taken now. */
  private taking(st: PartitionState, isRunning: () => boolean, isStale: () => boolean): boolean {
    return st.live && !this.draining && this.stateValue === 'running' && isRunning() && !isStale();
  }

  /**
   * Takes a batch in chunks of `TAKE_CHUNK` messages: decodes, routes and tracks a chunk, hands it
   * to its sinks, and lets I/O run before the next one, so that the sinks' writes (completions,
   * the next batch) go on while a large fetched batch is decoded. A chunk a sink has no room for
   * is held while the handler waits for room; if it comes too late the partition pauses and the
   * rest of the batch, not resolved, is fetched again after the resume.
   */
  private async take(
    st: PartitionState,
    messages: KafkaMessage[],
    resolveOffset: (offset: string) => void,
    heartbeat: () => Promise<void>,
    isRunning: () => boolean,
    isStale: () => boolean,
  ): Promise<void> {
    for (let from = 0; from < messages.length; ) {
      const to = Math.min(messages.length, from + TAKE_CHUNK);
      const hold = this.takeChunk(st, messages, from, to);
      // Taken (or skipped): kafkajs fetches after them from now on, whether or not every sink
      // had room. Resolving is only a note of the next offset to fetch.
      resolveOffset(messages[to - 1]!.offset);
      from = to;
      if (hold !== undefined && !this.push(hold)) {
        st.hold = hold;
        this.heldCount++;
        await this.waitForRoom(st, heartbeat, isRunning, isStale);
        if (st.hold !== undefined) return;
      } else if (from < messages.length) await yieldToIo();
      if (from < messages.length && !this.taking(st, isRunning, isStale)) return;
    }
  }

  /** Decodes, routes and tracks `messages[from, to)`; undefined when all were redeliveries. */
  private takeChunk(
    st: PartitionState,
    messages: KafkaMessage[],
    from: number,
    to: number,
  ): Hold | undefined {
    const source: KafkaSource = { topic: st.topic, partition: st.partition };
    const now = Date.now();
    const since = st.next;
    const records: unknown[] = [];
    const metas: MessageMeta[] = [];
    const runs: Run[] = [];
    let runSinks: AnySink[] | undefined;
    let runFrom = 0;
    let offset = 0n;
    for (let i = from; i < to; i++) {
      const m = messages[i]!;
      offset = toOffset(m.offset);
      if (since !== undefined && offset < since) {
        // Redelivered after a rejoin: already taken (and buffered, in flight, or durable).
        this.counts.skipped++;
        continue;
      }
      this.decodeAndRoute(m, source);
      const sinks = this.routedSinks;
      const meta = new MessageMeta(st, offset, Number(m.timestamp), now, sinks.length);
      if (runSinks === undefined || (sinks !== runSinks && !sameSinks(sinks, runSinks))) {
        if (runSinks !== undefined) runs.push(newRun(runFrom, metas.length, runSinks));
        runSinks = sinks;
        runFrom = metas.length;
      }
      records.push(this.routedRecord);
      metas.push(meta);
      st.queue.push(meta);
    }
    if (runSinks === undefined) return undefined;
    runs.push(newRun(runFrom, metas.length, runSinks));
    st.next = offset + 1n;
    st.lastSeen = offset;
    st.lastMessageAt = now;
    this.counts.messages += metas.length;
    // Messages routed nowhere are done at once.
    st.advance();
    return { records, metas, runs, run: 0 };
  }

  /**
   * Waits inside the batch handler, at most `pauseAfterMs`, for the partition's held messages to
   * be taken, calling `heartbeat()` between waits (a rebalance error from it propagates). Pauses
   * the partition if they are still held then. Returns early when the bridge stops taking.
   */
  private async waitForRoom(
    st: PartitionState,
    heartbeat: () => Promise<void>,
    isRunning: () => boolean,
    isStale: () => boolean,
  ): Promise<void> {
    const until = Date.now() + this.o.pauseAfterMs;
    while (st.hold !== undefined && st.live && !this.draining && this.stateValue === 'running') {
      const left = until - Date.now();
      if (left <= 0 || !isRunning() || isStale()) break;
      await this.room(Math.min(left, ROOM_SLICE_MS));
      await heartbeat();
    }
    if (st.hold === undefined || !st.live || st.paused) return;
    this.pauseKafka(st);
    this.counts.pauses++;
    this.emit('pause', { topic: st.topic, partition: st.partition, sink: waitingSink(st.hold) });
  }

  /** What failed the bridge. */
  private fatal: unknown;

  // Handlers waiting for held messages to be taken; woken after every retry round.
  private readonly roomWaiters = new Set<() => void>();

  private room(ms: number): Promise<void> {
    return new Promise((resolve) => {
      const done = () => {
        clearTimeout(timer);
        this.roomWaiters.delete(done);
        resolve();
      };
      const timer = setTimeout(done, ms);
      this.roomWaiters.add(done);
    });
  }

  // decodeAndRoute() leaves its result here rather than in a new object per message.
  private routedRecord: unknown;
  private routedSinks: AnySink[] = NO_SINKS;
  // The last single sink the router returned, and the list made for it: a router that returns the
  // same sink every time costs no array per message. (Arrays are not cached: a router may change
  // the contents of an array it returns again.)
  private lastRoute: unknown;
  private lastSinks: AnySink[] = NO_SINKS;

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
        if (route === this.lastRoute) {
          this.routedSinks = this.lastSinks;
          return;
        }
        if (!Array.isArray(route)) {
          this.watch(route as AnySink);
          this.lastRoute = route;
          this.lastSinks = [route as AnySink];
          this.routedSinks = this.lastSinks;
          return;
        }
        const list = route as AnySink[];
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
    this.routedSinks = this.decodeSinks;
  }

  /**
   * Offers held messages to their sinks, run after run; true once every sink took all of them.
   * Sinks of one run take their messages independently (one full sink does not hold the others
   * back), but a run starts only once the one before it is taken everywhere.
   */
  private push(hold: Hold): boolean {
    const { records, metas, runs } = hold;
    while (hold.run < runs.length) {
      const run = runs[hold.run]!;
      let taken = true;
      for (let k = 0; k < run.sinks.length; k++) {
        const from = run.cursors[k]!;
        if (from >= run.to) continue;
        const at = this.feed(run.sinks[k]!, records, metas, from, run.to);
        run.cursors[k] = at;
        if (at < run.to) taken = false;
        // A sink failed while taking (its own call stack): stop here, nothing more is taken.
        if (this.stateValue !== 'running') return false;
      }
      if (!taken) return false;
      hold.run++;
    }
    return true;
  }

  /** Hands `records[from, to)` to `sink` in bulk while it has room; returns the first not taken. */
  private feed(sink: AnySink, records: unknown[], metas: MessageMeta[], from: number, to: number): number {
    let at = from;
    try {
      // The usual case, a whole chunk for one sink, goes without a copy.
      if (from === 0 && to === records.length) return sink.tryWriteMany(records, metas);
      // Bounded chunks: a sink with little room copies little on each retry.
      while (at < to) {
        const end = Math.min(to, at + FEED_CHUNK);
        const n = sink.tryWriteMany(records.slice(at, end), metas.slice(at, end));
        at += n;
        if (at < end) break;
      }
    } catch (error) {
      // A failed or closed sink: its partitions stop here and are never committed past.
      this.fail(error);
    }
    return at;
  }

  private watch(sink: AnySink): void {
    if (this.sinks.has(sink)) return;
    // Duck-typed, so that two copies of @spillway/core in one app still work together.
    const s = sink as Partial<AnySink> | null;
    if (
      !s ||
      typeof s.tryWriteMany !== 'function' ||
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
    const metas = e.metas;
    for (let i = 0; i < metas.length; i++) {
      const meta = metas[i];
      if (meta === undefined) continue;
      // Not ours, or from a partition this member no longer owns (or owns anew): undefined.
      MessageMeta.settle(meta)?.advance();
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
      if (!this.draining && this.stateValue === 'running') {
        for (const st of this.parts.values()) {
          const hold = st.hold;
          if (!hold || !this.push(hold)) continue;
          st.hold = undefined;
          this.heldCount--;
          // Not paused when its handler is still waiting for room (and wakes up below).
          if (st.paused) {
            this.resumeKafka(st);
            this.emit('resume', { topic: st.topic, partition: st.partition });
          }
        }
      }
      for (const wake of [...this.roomWaiters]) wake();
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
    const st = new PartitionState(topic, partition, Date.now());
    this.parts.set(st.key, st);
    return st;
  }

  private dropPartition(st: PartitionState): void {
    if (st.hold) this.heldCount--;
    st.hold = undefined;
    st.live = false;
    this.parts.delete(st.key);
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
      const want = this.draining || st.hold !== undefined;
      if (want) this.pauseKafka(st);
      else if (paused.has(key) || st.paused) {
        st.paused = false;
        this.consumer.resume([{ topic: tp.topic, partitions: [tp.partition] }]);
      }
    }
    this.emit('assign', { assigned: [...keys.keys()], revoked, kept, generation: this.fence.generation });
  }

  private onCrash(error: unknown, restart: boolean, groupId: string): void {
    // kafkajs restarts the consumer (or gives up): whatever this member owned is gone.
    for (const st of [...this.parts.values()]) this.dropPartition(st);
    this.fence.revokeAll();
    if (!restart) this.fail(explainCrash(error, groupId));
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
    this.fatal = error;
    // Committing stays correct (a failed sink never settles its records); taking more does not.
    for (const st of this.parts.values()) this.pauseKafka(st);
    for (const wake of [...this.roomWaiters]) wake();
    this.emit('error', { error, fatal: true });
  }

  snapshot(): BridgeSnapshot {
    const now = Date.now();
    const partitions: PartitionSnapshot[] = [];
    for (const st of this.parts.values()) {
      const durable = st.committable();
      const committed = this.fence.lastCommitted(st.key);
      const oldest = st.oldest;
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
        pendingMessages: st.pending,
        heldMessages: st.heldMessages,
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
/**
 * Messages decoded and handed to the sinks between two turns of the event loop: small enough that
 * a sink's completed write starts the next one soon, large enough that the turn costs nothing.
 */
const TAKE_CHUNK = 1000;
/** A handler waiting for room wakes up at least this often to heartbeat, ms. */
const ROOM_SLICE_MS = 100;
/** Records per bulk hand-off to a sink once it has refused some (bounds the copy per retry). */
const FEED_CHUNK = 1024;

/** Kafka offsets are decimal strings of up to 19 digits; up to 15 a double is exact and faster. */
function toOffset(offset: string): bigint {
  return offset.length <= 15 ? BigInt(Number(offset)) : BigInt(offset);
}

function yieldToIo(): Promise<void> {
  return new Promise((resolve) => setImmediate(resolve));
}

function newRun(from: number, to: number, sinks: AnySink[]): Run {
  return { from, to, sinks, cursors: sinks.map(() => from) };
}

/** Same sinks in the same order (a router may build a new array for every record). */
function sameSinks(a: readonly AnySink[], b: readonly AnySink[]): boolean {
  if (a.length !== b.length) return false;
  for (let i = 0; i < a.length; i++) if (a[i] !== b[i]) return false;
  return true;
}

/** The name of the first sink that has not taken all messages of the current run. */
function waitingSink(hold: Hold): string {
  const run = hold.runs[hold.run]!;
  for (let k = 0; k < run.sinks.length; k++) if (run.cursors[k]! < run.to) return run.sinks[k]!.name;
  return run.sinks[0]?.name ?? '';
}

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

/**
 * The error a consumer crash fails the bridge with. kafkajs turns a FindCoordinator refusal into
 * "Failed to find group coordinator" without the broker's error; against a broker with ACLs that
 * is what a principal without READ on the group gets (seen in this repository's authorization
 * test), so the message says where to look.
 */
function explainCrash(error: unknown, groupId: string): unknown {
  if ((error as { name?: unknown } | undefined)?.name !== 'KafkaJSGroupCoordinatorNotFound') return error;
  return new StoreError(
    `No coordinator found for consumer group "${groupId}". kafkajs reports this when FindCoordinator fails for good: with ACLs, when the principal lacks READ on the group (GROUP_AUTHORIZATION_FAILED); otherwise when no broker can act as coordinator.`,
    { cause: error, driverCode: 'KafkaJSGroupCoordinatorNotFound', details: { groupId } },
  );
}
