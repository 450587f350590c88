/**
 * The consumer bridge: runs a kafkajs consumer into one or more sinks and commits, per partition,
 * only offsets whose records are durable (or dead-lettered) in every sink they were routed to.
 *
 * A message's walk crosses the files in order: `intake.ts` (the batch handler: take a chunk) →
 * `router.ts` (decode, route) → `handoff.ts` (bulk hand-off, held messages, settlements) →
 * `partition.ts` (per partition progress) → `commits.ts` (fenced commits). `assignment.ts` keeps
 * what this member owns across rebalances. This file wires them and runs the lifecycle.
 */
import { type PendingCounts, type RecordMeta, ShutdownTimeoutError, Sink } from '@spillway/core';
import { positiveOption, TypedEmitter } from '@spillway/core/kit';
import type { Consumer } from 'kafkajs';
import { Assignment } from './assignment.js';
import {
  type KafkaBridgeOptions,
  type ResolvedBridgeOptions,
  resolveBridgeOptions,
} from './bridge-options.js';
import type {
  BridgeControl,
  BridgeCounts,
  BridgeEventName,
  BridgeEvents,
  BridgeSnapshot,
  BridgeState,
  StopOptions,
} from './bridge-types.js';
import { explainCrash } from './classify.js';
import { Committer } from './commits.js';
import { within } from './deadline.js';
import { type DecodeFailure, decodeDeadLetterAdapter } from './decode.js';
import { Handoff } from './handoff.js';
import { Intake } from './intake.js';
import { MessageMeta } from './partition.js';
import { Router } from './router.js';
import { bridgeSnapshot } from './snapshot.js';
import { StoredOffsetReader } from './stored-offsets.js';

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
  private readonly events = new TypedEmitter<BridgeEvents>();
  private readonly counts: BridgeCounts = {
    messages: 0,
    undecodable: 0,
    skippedRedeliveries: 0,
    skippedStored: 0,
    commits: 0,
    commitErrors: 0,
    pauses: 0,
    rebalances: 0,
    rebalanceFlushes: 0,
    rebalanceFlushTimeouts: 0,
    uncommittedAtRevoke: 0,
  };
  private readonly control: BridgeControl;
  private readonly assignment: Assignment;
  private readonly handoff: Handoff;
  private readonly intake: Intake<R>;
  private readonly committer: Committer;
  /** Where undecodable messages go on their way to the dead-letter target. */
  private readonly decodeSink: Sink<DecodeFailure>;
  private readonly unsubscribe: Array<() => void> = [];
  private stateValue: BridgeState = 'created';
  private draining = false;
  /** What failed the bridge. */
  private fatal: unknown;
  private commitTimer: NodeJS.Timeout | undefined;
  private rejoinFlush: Promise<void> | undefined;
  private stopping: Promise<void> | undefined;
  private starting: Promise<void> | undefined;

  constructor(options: KafkaBridgeOptions<R>) {
    this.o = resolveBridgeOptions(options);
    this.name = this.o.name;
    this.consumer = this.o.consumer;
    this.control = {
      counts: this.counts,
      accepting: () => this.stateValue === 'running' && !this.draining,
      draining: () => this.draining,
      halted: () => this.draining || this.stateValue === 'failed',
      fail: (error) => this.fail(error),
      emit: (event, payload) => this.events.emit(event, payload),
    };
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
    const { offsetStores, groupId } = this.o;
    const reader =
      offsetStores.length > 0 && groupId !== undefined
        ? new StoredOffsetReader(offsetStores, groupId, this.control)
        : undefined;
    this.assignment = new Assignment(this.consumer, this.counts, reader?.fresh);
    reader?.attach(this.assignment);
    this.handoff = new Handoff(this.assignment, this.control);
    this.handoff.watch(this.decodeSink);
    const router = new Router(this.o, this.decodeSink, this.handoff.watch, this.counts);
    this.intake = new Intake(this.assignment, this.handoff, router, this.control, this.o.pauseAfterMs, () =>
      this.beforeRejoin(),
    );
    this.committer = new Committer(
      this.consumer,
      this.assignment.fence,
      this.assignment.parts,
      this.control,
      () => this.stateValue !== 'created' && this.stateValue !== 'stopped',
    );
  }

  get state(): BridgeState {
    return this.stateValue;
  }

  /** Connects, subscribes and starts consuming. Resolves once the consumer runs. */
  start(): Promise<void> {
    this.starting ??= this.doStart();
    return this.starting;
  }

  /**
   * Stops fetching, flushes the sinks, commits the durable offsets and disconnects, within
   * `timeoutMs`. Records still not durable at the deadline are not committed (the next owner
   * reads them again) and the promise rejects with `SPILLWAY_SHUTDOWN_TIMEOUT`.
   */
  stop(options: StopOptions = {}): Promise<void> {
    let timeoutMs: number;
    try {
      timeoutMs = positiveOption('timeoutMs', options.timeoutMs, 25_000);
    } catch (error) {
      return Promise.reject(error);
    }
    this.stopping ??= this.doStop(timeoutMs);
    return this.stopping;
  }

  /** Shutdown step 1: no more messages are taken; waits for a running handler to return. */
  async stopFetching(): Promise<void> {
    if (this.stateValue !== 'failed') this.stateValue = 'stopping';
    this.draining = true;
    this.stopCommitTimer();
    this.assignment.pauseAll();
    this.handoff.wakeAll();
    await this.intake.settled();
  }

  /**
   * Shutdown step 2: flushes every sink the bridge wrote to and waits for their records to be
   * terminal, at most `timeoutMs`. Held messages (a sink was full) are not written: they are not
   * committed either.
   */
  async flushAll(timeoutMs: number): Promise<void> {
    const all = Promise.all(
      [...this.handoff.sinks].map((s) =>
        s.state === 'open' || s.state === 'closing' ? s.flush() : undefined,
      ),
    );
    await within(
      all,
      timeoutMs,
      () => new ShutdownTimeoutError(`flush of bridge "${this.name}"`, timeoutMs, this.pending()),
    );
    await this.decodeSink.close({ timeoutMs }).catch(() => undefined);
  }

  /**
   * Shutdown step 3, and every `commitIntervalMs` while running: commits, for every owned
   * partition, the offset after the last message whose records are all durable or dead-lettered.
   * A commit refused because the group is rebalancing resolves; other failures reject.
   */
  commit(): Promise<void> {
    return this.committer.commit();
  }

  /** Shutdown step 4: leaves the group and closes the sockets. */
  async disconnect(): Promise<void> {
    this.stopCommitTimer();
    try {
      await this.consumer.disconnect();
    } finally {
      for (const off of this.unsubscribe.splice(0)) off();
      this.handoff.unwatchAll();
      if (this.stateValue !== 'failed') this.stateValue = 'stopped';
      this.assignment.revokeAll();
    }
  }

  /** Records of this bridge's sinks not yet terminal. */
  pending(): PendingCounts {
    const p = { buffered: 0, inFlight: 0, retrying: 0 };
    for (const s of this.handoff.sinks) {
      const q = s.pending();
      p.buffered += q.buffered;
      p.inFlight += q.inFlight;
      p.retrying += q.retrying;
    }
    return p;
  }

  snapshot(): BridgeSnapshot {
    const { fence, parts } = this.assignment;
    return bridgeSnapshot(this.name, this.stateValue, fence, parts.values(), this.counts);
  }

  on<E extends BridgeEventName>(event: E, listener: (payload: BridgeEvents[E]) => void): this {
    this.events.on(event, listener);
    return this;
  }

  off<E extends BridgeEventName>(event: E, listener: (payload: BridgeEvents[E]) => void): this {
    this.events.off(event, listener);
    return this;
  }

  private async doStart(): Promise<void> {
    const c = this.consumer;
    this.unsubscribe.push(
      c.on(c.events.GROUP_JOIN, (e) => {
        this.counts.rebalances++;
        const { memberId, memberAssignment } = e.payload;
        this.events.emit('assign', this.assignment.join(memberId, memberAssignment, this.draining));
      }),
      c.on(c.events.REBALANCING, () => {
        // No handler is running (all partitions idle or paused), so nothing can hold the group
        // open: flush and commit as best effort while kafkajs rejoins.
        if (this.intake.idle && !this.draining) void this.beforeRejoin();
      }),
      c.on(c.events.CRASH, (e) => {
        this.assignment.crash();
        if (!e.payload.restart) this.fail(explainCrash(e.payload.error, e.payload.groupId));
      }),
    );
    await c.connect();
    await c.subscribe({ topics: [...this.o.topics], fromBeginning: this.o.fromBeginning });
    await c.run({ autoCommit: false, eachBatchAutoResolve: false, eachBatch: this.intake.onBatch });
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

  private stopCommitTimer(): void {
    if (this.commitTimer) clearInterval(this.commitTimer);
    this.commitTimer = undefined;
  }

  /**
   * Flushes this bridge's records in every sink (reason `revoke`) for at most `rebalanceFlushMs`,
   * then commits what is durable.
   */
  private beforeRejoin(): Promise<void> {
    this.rejoinFlush ??= (async () => {
      this.counts.rebalanceFlushes++;
      // What is durable already is committed at once: on the REBALANCING path kafkajs is sending
      // its join meanwhile, and a commit that reaches the coordinator first is still accepted.
      const early = this.commit().catch(() => undefined);
      try {
        const ours = (meta: RecordMeta | undefined) =>
          meta !== undefined && MessageMeta.ownerOf(meta) !== undefined;
        const flushed = Promise.all(
          [...this.handoff.sinks].filter((s) => s.state === 'open').map((s) => s.revoke(ours)),
        ).then(() => true);
        const ok = await within(flushed, this.o.rebalanceFlushMs, () => undefined).catch(() => false);
        if (!ok) this.counts.rebalanceFlushTimeouts++;
        await early;
        await this.commit().catch(() => undefined);
      } finally {
        this.rejoinFlush = undefined;
      }
    })();
    return this.rejoinFlush;
  }

  private fail(error: unknown): void {
    if (this.stateValue === 'failed') return;
    this.stateValue = 'failed';
    this.fatal = error;
    // Committing stays correct (a failed sink never settles its records); taking more does not.
    this.assignment.pauseAll();
    this.handoff.wakeAll();
    this.events.emit('error', { error, fatal: true });
  }
}
