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

/** The sink holds records that are not yet terminal. */
export function holdExit(sink: ExitFlushable): void {
  holding.add(sink);
  if (!listening) {
    listening = true;
    process.on('beforeExit', onBeforeExit);
  }
}

/** The sink holds nothing any more (or can never write again). */
export function releaseExit(sink: ExitFlushable): void {
  holding.delete(sink);
}
