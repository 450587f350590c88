// What the bridge worker programs share: their config from BRIDGE_WORKER, one JSON object a line
// on stdout per event, the process-wide shutdown coordinator, the consumer's short group timers,
// and the bridge's assignments, errors and stats (every 500 ms and once more at shutdown).
import { installShutdown, type ShutdownCoordinator } from '@spillway/core';
import type { KafkaBridge } from '@spillway/kafka';

export type Emit = (event: string, data?: Record<string, unknown>) => void;

export interface WorkerProcess<C> {
  config: C;
  /** Prints `{"event", "label", "pid", "t", …data}` as one line on stdout. */
  out: Emit;
  shutdown: ShutdownCoordinator;
}

/** Reads the config, installs the shutdown coordinator (20 s) and its log on stderr. */
export function workerProcess<C extends { label: string }>(): WorkerProcess<C> {
  const config = JSON.parse(process.env.BRIDGE_WORKER ?? '{}') as C;
  const out: Emit = (event, data = {}) =>
    process.stdout.write(
      `${JSON.stringify({ event, label: config.label, pid: process.pid, t: Date.now(), ...data })}\n`,
    );
  const shutdown = installShutdown({
    timeoutMs: 20_000,
    log: (line) => process.stderr.write(`[${config.label}] ${line}\n`),
  });
  return { config, out, shutdown };
}

/** Short group timers, so that a rebalance takes about a second; the flush deadline stays well under them. */
export function groupTimers(sessionTimeout = 10_000) {
  return { sessionTimeout, rebalanceTimeout: 20_000, heartbeatInterval: 500, maxWaitTimeInMs: 200 };
}

/** Reports the bridge's assignments and errors as they come, and `stats()` every 500 ms and at shutdown. */
export function reportBridge<T>(
  bridge: KafkaBridge<T>,
  { out, shutdown }: Pick<WorkerProcess<unknown>, 'out' | 'shutdown'>,
  stats: () => Record<string, unknown>,
): void {
  bridge.on('assign', (e) => out('assign', { assigned: e.assigned, revoked: e.revoked, kept: e.kept }));
  bridge.on('error', (e) => out('error', { fatal: e.fatal, message: (e.error as Error)?.message }));
  const print = () => out('stats', stats());
  const timer = setInterval(print, 500);
  timer.unref();
  shutdown.add('sources', 'stats', () => clearInterval(timer));
  shutdown.add('clients', 'final stats', print);
}
