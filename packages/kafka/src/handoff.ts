/**
 * Handing taken messages to their sinks: bulk hand-off while a sink has room, held messages
 * offered again when room frees up, the handlers that wait for room, and the sinks' settlements
 * that move the partitions' commit points.
 */
import type { SinkEvents } from '@spillway/core';
import type { Assignment } from './assignment.js';
import type { BridgeControl } from './bridge-types.js';
import { type AnySink, type Hold, MessageMeta, type PartitionState } from './partition.js';

/** Records per bulk hand-off to a sink once it has refused some (bounds the copy per retry). */
const FEED_CHUNK = 1024;

export class Handoff {
  /** Every sink a route named: the bridge flushes, revokes and listens to these. */
  readonly sinks = new Set<AnySink>();
  private readonly assignment: Assignment;
  private readonly control: BridgeControl;
  /** Handlers waiting for held messages to be taken; woken after every retry round. */
  private readonly roomWaiters = new Set<() => void>();
  private retryScheduled = false;
  /** Bound once, so that the same functions are added to and removed from the sinks' events. */
  private readonly onSettled = (e: SinkEvents['settled']): void => this.settled(e);
  private readonly onSinkError = (e: SinkEvents['error']): void => this.control.fail(e.error);
  /** For the router: called for every sink a route names. */
  readonly watch = (sink: AnySink): void => this.watchSink(sink);

  constructor(assignment: Assignment, control: BridgeControl) {
    this.assignment = assignment;
    this.control = control;
  }

  /** Starts listening to a sink a route named; throws a TypeError for anything else. */
  private watchSink(sink: AnySink): void {
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

  /** Stops listening to every sink (the bridge disconnected). */
  unwatchAll(): void {
    for (const s of this.sinks) {
      s.off('settled', this.onSettled);
      s.off('error', this.onSinkError);
    }
  }

  /**
   * Offers held messages to their sinks, run after run; true once every sink took all of them.
   * Sinks of one run take their messages independently (one full sink does not hold the others
   * back), but a run starts only once the one before it is taken everywhere.
   */
  push(hold: Hold): boolean {
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
        if (!this.control.accepting()) return false;
      }
      if (!taken) return false;
      hold.run++;
    }
    return true;
  }

  /** Resolves after `ms`, or sooner when room may have freed up or the bridge stops taking. */
  room(ms: number): Promise<void> {
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

  /** Wakes every handler waiting for room (the bridge stops or failed). */
  wakeAll(): void {
    for (const wake of [...this.roomWaiters]) wake();
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
      this.control.fail(error);
    }
    return at;
  }

  private settled(e: SinkEvents['settled']): void {
    const metas = e.metas;
    // The partitions whose messages became done: each is advanced once, after the loop (a
    // settlement's metas mostly come from one partition, in offset order).
    let last: PartitionState | undefined;
    let others: Set<PartitionState> | undefined;
    for (let i = 0; i < metas.length; i++) {
      const meta = metas[i];
      if (meta === undefined) continue;
      // Not ours, or from a partition this member no longer owns (or owns anew): undefined.
      const st = MessageMeta.settle(meta);
      if (st === undefined || st === last) continue;
      if (last !== undefined) (others ??= new Set()).add(last);
      last = st;
    }
    last?.advance();
    if (others !== undefined) for (const st of others) if (st !== last) st.advance();
    if (this.assignment.holding) this.scheduleRetry();
  }

  /** Room may have freed up: offer held messages again (outside the sink's own call stack). */
  private scheduleRetry(): void {
    if (this.retryScheduled) return;
    this.retryScheduled = true;
    setImmediate(() => {
      this.retryScheduled = false;
      if (this.control.accepting()) {
        for (const st of this.assignment.parts.values()) {
          const hold = st.hold;
          if (!hold || !this.push(hold)) continue;
          this.assignment.release(st);
          // Not paused when its handler is still waiting for room (and wakes up below).
          if (st.paused) {
            this.assignment.resume(st);
            this.control.emit('resume', { topic: st.topic, partition: st.partition });
          }
        }
      }
      this.wakeAll();
    });
  }
}
