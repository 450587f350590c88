// How a tune stops early: on SIGINT / SIGTERM (unless the caller keeps the signals) or on the
// caller's AbortSignal. The tune checks `halt()` between steps and tidies its scratch store up in
// its own `finally`; `dispose()` removes the listeners.
import { SpillwayError } from '@spillway/core';

export interface Interruption {
  /** Aborted when the tune must stop: hand it to the running trial. */
  signal: AbortSignal;
  /** Throws SPILLWAY_ABORTED (naming the signal) once the tune was interrupted. */
  halt(): void;
  dispose(): void;
}

/**
 * Listens for the signals and the caller's abort. `tidied` completes the message, e.g. "the
 * scratch copy was dropped": the caller's `finally` does that before the error reaches anyone.
 */
export function interruption(
  o: { handleSignals?: boolean | undefined; signal?: AbortSignal | undefined },
  tidied: string,
): Interruption {
  const stop = new AbortController();
  let interrupted: string | undefined;
  const onSignal = (sig: NodeJS.Signals) => {
    interrupted ??= sig;
    stop.abort(new Error(sig));
  };
  const external = () => {
    interrupted ??= 'abort';
    stop.abort(o.signal?.reason);
  };
  o.signal?.addEventListener('abort', external, { once: true });
  const handle = o.handleSignals ?? true;
  if (handle) {
    process.on('SIGINT', onSignal);
    process.on('SIGTERM', onSignal);
  }
  return {
    signal: stop.signal,
    halt() {
      if (stop.signal.aborted)
        throw new SpillwayError(
          'SPILLWAY_ABORTED',
          `The tune was interrupted${interrupted && interrupted !== 'abort' ? ` by ${interrupted}` : ''}; ${tidied}`,
          { details: { signal: interrupted } },
        );
    },
    dispose() {
      o.signal?.removeEventListener('abort', external);
      if (handle) {
        process.off('SIGINT', onSignal);
        process.off('SIGTERM', onSignal);
      }
    },
  };
}
