/**
 * The safety net under "nothing buffered is lost at process exit". A sink's own timers keep the
 * event loop alive while it holds records (the system clock's timers are referenced), so a program
 * whose input ends flushes at `maxAgeMs` / `idleMs` and exits once the records are terminal. Should
 * the loop still empty while a sink holds buffered records (a custom clock whose timers do not keep
 * the process alive, say), Node emits `beforeExit`: every such sink then flushes at once, and the
 * write it starts keeps the process alive until the records are durable or dead-lettered.
 */

/** What the net needs of a sink. */
export interface ExitFlushable {
  /** Starts a flush of every buffered record, without waiting for it. */
  flushBeforeExit(): void;
}

const holding = new Set<ExitFlushable>();
let listening = false;

function onBeforeExit(): void {
  for (const sink of [...holding]) sink.flushBeforeExit();
}

/** One sink's place in the net: held while it has records that are not terminal. */
export class ExitHold {
  private held = false;

  constructor(private readonly sink: ExitFlushable) {}

  /** The sink accepted a record (cheap when already held: called per record). */
  hold(): void {
    if (this.held) return;
    this.held = true;
    holding.add(this.sink);
    if (!listening) {
      listening = true;
      process.on('beforeExit', onBeforeExit);
    }
  }

  /** The sink holds nothing any more (or can never write again). */
  release(): void {
    if (!this.held) return;
    this.held = false;
    holding.delete(this.sink);
  }
}

/** What the exit report needs of a sink that stopped on a fatal error. */
export interface FailedSink {
  readonly name: string;
  /** Accepted records that are neither durable nor dead-lettered. */
  unwritten(): number;
  /** The stable code of the fatal error (its driver code when it has one). */
  readonly failureCode: string;
}

const failed = new Set<FailedSink>();
let reporting = false;

function onExit(): void {
  for (const sink of failed) {
    const n = sink.unwritten();
    if (n === 0) continue;
    // Never record contents: the sink's name, the error's code and a count.
    process.stderr.write(
      `spillway: sink "${sink.name}" stopped after a fatal error (${sink.failureCode}) with ${n} accepted record(s) not written\n`,
    );
    if (!process.exitCode) process.exitCode = 1;
  }
}

/**
 * A sink that failed for good may still hold accepted records, which will never be written. If the
 * process ends with any of them, it says so on stderr and exits 1 instead of 0: an end of input
 * followed by a store that refuses everything must not look like success.
 */
export function reportLossAtExit(sink: FailedSink): void {
  failed.add(sink);
  if (!reporting) {
    reporting = true;
    process.on('exit', onExit);
  }
}
