/**
 * Taking fetched batches: the kafkajs `eachBatch` handler. A batch is taken in chunks: each chunk
 * is decoded and routed, tracked in its partition's progress, and handed to its sinks; a chunk a
 * sink has no room for is held while the handler waits for room, and the partition pauses if the
 * room comes too late.
 */
import type { EachBatchPayload, KafkaMessage } from 'kafkajs';
import type { Assignment } from './assignment.js';
import type { BridgeControl } from './bridge-types.js';
import { isRejoinSignal } from './commits.js';
import type { KafkaSource } from './decode.js';
import type { Handoff } from './handoff.js';
import { type AnySink, type Hold, MessageMeta, type PartitionState, type Run } from './partition.js';
import type { Router } from './router.js';

/**
 * Messages decoded and handed to the sinks between two turns of the event loop: small enough that
 * a sink's completed write starts the next one soon, large enough that the turn costs nothing.
 */
const TAKE_CHUNK = 1000;
/** A handler waiting for room wakes up at least this often to heartbeat, ms. */
const ROOM_SLICE_MS = 100;

type BatchCalls = Pick<EachBatchPayload, 'resolveOffset' | 'heartbeat' | 'isRunning' | 'isStale'>;

export class Intake<R> {
  private readonly assignment: Assignment;
  private readonly handoff: Handoff;
  private readonly router: Router<R>;
  private readonly control: BridgeControl;
  private readonly pauseAfterMs: number;
  /** Called when heartbeat() says the group is rebalancing: flush and commit before rejoining. */
  private readonly beforeRejoin: () => Promise<void>;
  /** Handlers running now. */
  private readonly running = new Set<Promise<void>>();
  /** The kafkajs `eachBatch` handler. */
  readonly onBatch = (payload: EachBatchPayload): Promise<void> => this.track(payload);

  constructor(
    assignment: Assignment,
    handoff: Handoff,
    router: Router<R>,
    control: BridgeControl,
    pauseAfterMs: number,
    beforeRejoin: () => Promise<void>,
  ) {
    this.assignment = assignment;
    this.handoff = handoff;
    this.router = router;
    this.control = control;
    this.pauseAfterMs = pauseAfterMs;
    this.beforeRejoin = beforeRejoin;
  }

  /** No handler is running (all partitions idle or paused). */
  get idle(): boolean {
    return this.running.size === 0;
  }

  /** Resolves once every running handler has returned. */
  async settled(): Promise<void> {
    await Promise.allSettled([...this.running]);
  }

  /** Runs one batch, known as running until it returns. */
  private async track(payload: EachBatchPayload): Promise<void> {
    const run = this.handleBatch(payload);
    this.running.add(run);
    try {
      await run;
    } finally {
      this.running.delete(run);
    }
  }

  private async handleBatch(payload: EachBatchPayload): Promise<void> {
    const { batch, heartbeat } = payload;
    const st = this.assignment.partitionFor(batch.topic, batch.partition);
    try {
      if (st && this.taking(st, payload)) {
        st.highWatermark = BigInt(batch.highWatermark);
        // With held messages the partition is paused: a batch fetched before the pause is left
        // unresolved, so kafkajs fetches it again after resume.
        if (st.hold === undefined) await this.take(st, batch.messages, payload);
      }
      await heartbeat();
    } catch (error) {
      // The group is rebalancing and waits for this member's join: flush and commit now, so the
      // partitions move with their progress, then let kafkajs rejoin (it checks the error's type).
      if (isRejoinSignal(error) && !this.control.draining()) await this.beforeRejoin();
      throw error;
    }
  }

  /** Whether messages of `st` may be taken now. */
  private taking(st: PartitionState, calls: BatchCalls): boolean {
    return st.live && !st.loading && this.control.accepting() && calls.isRunning() && !calls.isStale();
  }

  /**
   * Takes a batch in chunks of `TAKE_CHUNK` messages, letting I/O run between chunks so that the
   * sinks' writes (completions, the next batch) go on while a large fetched batch is decoded. If
   * the room for a held chunk comes too late the partition pauses and the rest of the batch, not
   * resolved, is fetched again after the resume.
   */
  private async take(st: PartitionState, messages: KafkaMessage[], calls: BatchCalls): Promise<void> {
    for (let from = 0; from < messages.length; ) {
      const to = Math.min(messages.length, from + TAKE_CHUNK);
      const hold = this.takeChunk(st, messages, from, to);
      // Taken (or skipped): kafkajs fetches after them from now on, whether or not every sink
      // had room. Resolving is only a note of the next offset to fetch.
      calls.resolveOffset(messages[to - 1]!.offset);
      from = to;
      if (hold !== undefined && !this.handoff.push(hold)) {
        this.assignment.hold(st, hold);
        await this.waitForRoom(st, calls);
        if (st.hold !== undefined) return;
      } else if (from < messages.length) await yieldToIo();
      if (from < messages.length && !this.taking(st, calls)) return;
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
    // Redelivered after a rejoin: below `st.next`, already taken (and buffered, in flight, or
    // durable). A fetched batch holds one partition's messages in offset order, so one look at
    // the chunk's first offset tells whether any is below; only then is each one converted.
    const since = st.next;
    const redelivered = since !== undefined && BigInt(messages[from]!.offset) < since;
    const records: unknown[] = [];
    const metas: MessageMeta[] = [];
    const runs: Run[] = [];
    let runSinks: AnySink[] | undefined;
    let runFrom = 0;
    // Messages produced together share their timestamp: each distinct one is parsed once.
    let tsText: string | undefined;
    let ts: number | undefined;
    for (let i = from; i < to; i++) {
      const m = messages[i]!;
      if (redelivered && BigInt(m.offset) < since) {
        this.control.counts.skippedRedeliveries++;
        continue;
      }
      let sinks = this.router.routeInto(m, source, records);
      if (st.floors !== undefined) sinks = this.aboveFloors(st, sinks, BigInt(m.offset));
      if (m.timestamp !== tsText) {
        tsText = m.timestamp;
        const parsed = Number(tsText);
        ts = Number.isFinite(parsed) ? parsed : undefined;
      }
      const meta = new MessageMeta(st, m.offset, ts, sinks.length);
      if (runSinks === undefined || (sinks !== runSinks && !sameSinks(sinks, runSinks))) {
        if (runSinks !== undefined) runs.push(newRun(runFrom, metas.length, runSinks));
        runSinks = sinks;
        runFrom = metas.length;
      }
      metas.push(meta);
    }
    if (runSinks === undefined) return undefined;
    runs.push(newRun(runFrom, metas.length, runSinks));
    // The chunk's metas are the partition's progress slots: queued as one array, not one by one.
    st.enqueue(metas, now);
    st.firstTaken ??= BigInt(metas[0]!.offset);
    const last = BigInt(metas[metas.length - 1]!.offset);
    st.next = last + 1n;
    st.lastSeen = last;
    st.lastMessageAt = now;
    this.control.counts.messages += metas.length;
    // Messages routed nowhere are done at once.
    st.advance();
    return { records, metas, runs, run: 0 };
  }

  /**
   * The sinks of `sinks` whose stored offset (exactly-once) is at or below `offset`. Once the
   * partition is past every stored offset it checks nothing more.
   */
  private aboveFloors(st: PartitionState, sinks: AnySink[], offset: bigint): AnySink[] {
    const floors = st.floors!;
    let past = true;
    for (const f of floors.values()) if (offset < f) past = false;
    if (past) {
      st.floors = undefined;
      return sinks;
    }
    const kept = sinks.filter((s) => {
      const f = floors.get(s);
      return f === undefined || offset >= f;
    });
    if (kept.length === sinks.length) return sinks;
    this.control.counts.skippedStored++;
    return kept;
  }

  /**
   * Waits inside the batch handler, at most `pauseAfterMs`, for the partition's held messages to
   * be taken, calling `heartbeat()` between waits (a rebalance error from it propagates). Pauses
   * the partition if they are still held then. Returns early when the bridge stops taking.
   */
  private async waitForRoom(st: PartitionState, calls: BatchCalls): Promise<void> {
    const until = Date.now() + this.pauseAfterMs;
    while (st.hold !== undefined && st.live && this.control.accepting()) {
      const left = until - Date.now();
      if (left <= 0 || !calls.isRunning() || calls.isStale()) break;
      await this.handoff.room(Math.min(left, ROOM_SLICE_MS));
      await calls.heartbeat();
    }
    if (st.hold === undefined || !st.live || st.paused) return;
    this.assignment.pause(st);
    this.control.counts.pauses++;
    this.control.emit('pause', { topic: st.topic, partition: st.partition, sink: waitingSink(st.hold) });
  }
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
