import { constants } from 'node:os';
import type { PendingCounts } from './errors.js';
import { messageOf, ShutdownTimeoutError, SpillwayError } from './errors.js';
import { invalidOption, numberOption } from './option-checks.js';

/** Stages run in this order; the steps of one stage run together. */
export type ShutdownStage = 'sources' | 'sinks' | 'progress' | 'clients';
export const SHUTDOWN_STAGES: readonly ShutdownStage[] = ['sources', 'sinks', 'progress', 'clients'];

export interface ShutdownOptions {
  /**
   * Signals that start a graceful shutdown. A second one forces exit at once.
   * @default ['SIGTERM', 'SIGINT']
   */
  signals?: readonly string[];
  /**
   * Deadline for the whole shutdown, ms. Keep it under the platform's grace period (Kubernetes
   * sends SIGKILL 30 s after SIGTERM by default) and above the store's worst flush time.
   * @default 25000
   */
  timeoutMs?: number;
  /** Call `process.exit()` when done (128 + signal number when clean, 1 otherwise). @default true */
  exit?: boolean;
  /** Where progress lines go. Never receives record contents. @default console.error */
  log?: (line: string) => void;
  /**
   * Also shut down on a crash elsewhere in the program: on `uncaughtException` or
   * `unhandledRejection` the error is logged (its message and stack; never record contents), the
   * same ordered shutdown runs within `timeoutMs`, and the process exits 1. Every registered sink
   * gets a best-effort flush of what it holds (buffered and in flight) within that deadline.
   * What is not kept: records still pending when the deadline passes, and records a
   * non-replayable source had produced but not yet handed to a sink. An error that arrives while
   * a shutdown is already running is logged and does not cut it short (its exit code stands).
   * `false` leaves both events to Node (which prints the error and exits 1 without a flush) or to
   * your own handlers.
   * @default true
   */
  handleCrashes?: boolean;
}

/** What a step gets: the time left and a signal that aborts at the deadline. */
export interface StepContext {
  remainingMs: number;
  signal: AbortSignal;
}

export type ShutdownStep = (ctx: StepContext) => Promise<void> | void;

export interface ShutdownReport {
  reason: string;
  ok: boolean;
  durationMs: number;
  steps: Array<{ stage: ShutdownStage; name: string; ok: boolean; ms: number; error?: string }>;
  exitCode: number;
}

interface Registered {
  stage: ShutdownStage;
  name: string;
  run: ShutdownStep;
  pending?: () => PendingCounts;
}

/** The part of a Sink the coordinator needs. */
export interface ClosableSink {
  readonly name: string;
  close(options?: { timeoutMs?: number; laterWrites?: 'reject' | 'park' }): Promise<void>;
  pending(): PendingCounts;
}

/**
 * Runs the shutdown sequence — stop sources, flush sinks, commit progress, close clients — once,
 * within a deadline. `installShutdown()` wires it to process signals.
 */
export class ShutdownCoordinator {
  private readonly steps: Registered[] = [];
  private readonly controller = new AbortController();
  private running: Promise<ShutdownReport> | undefined;
  readonly timeoutMs: number;
  private readonly log: (line: string) => void;

  constructor(options: Pick<ShutdownOptions, 'timeoutMs' | 'log'> = {}) {
    this.timeoutMs = numberOption('timeoutMs', options.timeoutMs, 25_000, { min: 0, exclusiveMin: true });
    this.log = options.log ?? ((line) => console.error(line));
  }

  /** Aborted as soon as shutdown begins: sources can stop on it. */
  get signal(): AbortSignal {
    return this.controller.signal;
  }

  get started(): boolean {
    return this.running !== undefined;
  }

  /** Registers a step; returns a function that unregisters it. */
  add(stage: ShutdownStage, name: string, run: ShutdownStep, pending?: () => PendingCounts): () => void {
    if (!SHUTDOWN_STAGES.includes(stage))
      throw invalidOption('stage', `one of ${SHUTDOWN_STAGES.join(', ')}`, stage);
    const step: Registered = pending ? { stage, name, run, pending } : { stage, name, run };
    this.steps.push(step);
    return () => {
      const i = this.steps.indexOf(step);
      if (i >= 0) this.steps.splice(i, 1);
    };
  }

  /**
   * Registers a sink: closed in the `sinks` stage with the time that is left. The close parks
   * later writes (`laterWrites: 'park'`): a `write()` waiting for room when it begins joins the
   * final flush and resolves; one that arrives after it never settles and is not accepted, so the
   * program's own producer loop stops quietly while the flush runs and the process exits with the
   * shutdown's code.
   */
  addSink(sink: ClosableSink): () => void {
    return this.add(
      'sinks',
      `sink ${sink.name}`,
      ({ remainingMs }) => sink.close({ timeoutMs: Math.max(1, remainingMs), laterWrites: 'park' }),
      () => sink.pending(),
    );
  }

  /** A line per registered sink that still holds records, for the forced-exit message. */
  describePending(): string[] {
    const lines: string[] = [];
    for (const s of this.steps) {
      const p = s.pending?.();
      if (p && p.buffered + p.inFlight > 0) {
        lines.push(`${s.name}: ${p.buffered} buffered, ${p.inFlight} in flight (${p.retrying} retrying)`);
      }
    }
    return lines;
  }

  /** Runs the sequence once; later calls return the same report. */
  shutdown(reason = 'requested', signalNumber?: number): Promise<ShutdownReport> {
    this.running ??= this.run(reason, signalNumber);
    return this.running;
  }

  private async run(reason: string, signalNumber: number | undefined): Promise<ShutdownReport> {
    const t0 = performance.now();
    const deadline = t0 + this.timeoutMs;
    this.controller.abort(new SpillwayError('SPILLWAY_SINK_CLOSED', `shutdown: ${reason}`));
    this.log(`spillway: shutting down (${reason}), deadline ${this.timeoutMs} ms`);
    const report: ShutdownReport = { reason, ok: true, durationMs: 0, steps: [], exitCode: 0 };
    const stepAbort = new AbortController();
    const timer = setTimeout(() => stepAbort.abort(), this.timeoutMs);
    timer.unref();
    try {
      for (const stage of SHUTDOWN_STAGES) {
        const steps = this.steps.filter((s) => s.stage === stage);
        await Promise.all(
          steps.map(async (s) => {
            const started = performance.now();
            const remainingMs = Math.max(0, deadline - started);
            try {
              if (remainingMs <= 0) {
                throw new ShutdownTimeoutError(
                  `shutdown step "${s.name}"`,
                  this.timeoutMs,
                  s.pending?.() ?? { buffered: 0, inFlight: 0, retrying: 0 },
                );
              }
              await withDeadline(
                Promise.resolve(s.run({ remainingMs, signal: stepAbort.signal })),
                remainingMs,
                () =>
                  new ShutdownTimeoutError(
                    `shutdown step "${s.name}"`,
                    this.timeoutMs,
                    s.pending?.() ?? { buffered: 0, inFlight: 0, retrying: 0 },
                  ),
              );
              report.steps.push({ stage, name: s.name, ok: true, ms: performance.now() - started });
            } catch (error) {
              report.ok = false;
              report.steps.push({
                stage,
                name: s.name,
                ok: false,
                ms: performance.now() - started,
                error: messageOf(error),
              });
              this.log(`spillway: ${stage}: ${s.name} failed: ${messageOf(error)}`);
            }
          }),
        );
      }
    } finally {
      clearTimeout(timer);
    }
    report.durationMs = performance.now() - t0;
    report.exitCode = report.ok ? (signalNumber === undefined ? 0 : 128 + signalNumber) : 1;
    this.log(
      `spillway: shutdown ${report.ok ? 'complete' : 'incomplete'} in ${Math.round(report.durationMs)} ms`,
    );
    return report;
  }
}

function withDeadline<T>(work: Promise<T>, ms: number, onTimeout: () => Error): Promise<T> {
  return new Promise<T>((resolve, reject) => {
    const t = setTimeout(() => reject(onTimeout()), ms);
    work.then(
      (v) => {
        clearTimeout(t);
        resolve(v);
      },
      (e) => {
        clearTimeout(t);
        reject(e);
      },
    );
  });
}

let installed: ShutdownCoordinator | undefined;

/**
 * Installs the process-wide coordinator once (later calls return it): the first listed signal
 * starts the graceful sequence and exits with 128 + the signal's number (143 for SIGTERM, 130 for
 * SIGINT), or 1 when a step failed or the deadline passed; a second signal prints what is still
 * pending and exits at once. An uncaught exception or unhandled rejection runs the same sequence
 * and exits 1 (see `handleCrashes`).
 */
export function installShutdown(options: ShutdownOptions = {}): ShutdownCoordinator {
  if (installed) return installed;
  const signals = options.signals ?? ['SIGTERM', 'SIGINT'];
  if (!Array.isArray(signals) || signals.length === 0)
    throw invalidOption('signals', 'a non-empty array of signal names', signals);
  const numbers = constants.signals as Record<string, number | undefined>;
  for (const s of signals) {
    if (typeof s !== 'string' || numbers[s] === undefined || s === 'SIGKILL' || s === 'SIGSTOP') {
      throw invalidOption(
        'signals',
        'signal names such as "SIGTERM" or "SIGINT" (SIGKILL and SIGSTOP cannot be caught)',
        s,
      );
    }
  }
  const exit = options.exit ?? true;
  const handleCrashes = options.handleCrashes ?? true;
  if (typeof handleCrashes !== 'boolean') throw invalidOption('handleCrashes', 'a boolean', handleCrashes);
  const log = options.log ?? ((line: string) => console.error(line));
  const coordinator = new ShutdownCoordinator({ ...options, log });
  installed = coordinator;
  for (const name of signals) {
    process.on(name as NodeJS.Signals, () => {
      const signo = numbers[name]!;
      if (coordinator.started) {
        log(`spillway: ${name} again: forcing exit`);
        for (const line of coordinator.describePending()) log(`spillway: still pending: ${line}`);
        process.exit(128 + signo);
      }
      void coordinator.shutdown(name, signo).then((report) => {
        if (exit) process.exit(report.exitCode);
      });
    });
  }
  if (handleCrashes) {
    const onCrash = (kind: string) => (error: unknown) => {
      log(`spillway: ${kind}: ${describeCrash(error)}`);
      if (coordinator.started) {
        log(`spillway: ${kind} during shutdown: the shutdown continues`);
        return;
      }
      void coordinator.shutdown(kind).then(() => {
        if (exit) process.exit(1);
        else process.exitCode = 1;
      });
    };
    process.on('uncaughtException', onCrash('uncaught exception'));
    process.on('unhandledRejection', onCrash('unhandled rejection'));
  }
  return coordinator;
}

/** An error's stack (which starts with its message), or its text: the program's own words, no records. */
function describeCrash(error: unknown): string {
  if (error instanceof Error) return error.stack ?? `${error.name}: ${error.message}`;
  return messageOf(error);
}
