// Runs a README program as a user would (`node program.js`), in its own process, and reads back
// what its sink accepted. The only thing a test adds to a README program is a preamble whose
// 'exit' listener prints the sink's counters as the process ends, so that the test can compare
// the store's contents with what the library took in.
import { type ChildProcess, spawn } from 'node:child_process';
import { setTimeout as sleep } from 'node:timers/promises';
import type { Program } from './project.js';

/** The counters the preamble prints at exit. */
export interface ExitReport {
  code: number;
  accepted: number;
  written: number;
  deadLettered: number;
  pendingRecords: number;
  backpressureWaits: number;
  state: string;
}

export const REPORT_PREFIX = '@@readme-exit ';

/**
 * The program with a preamble that prints `sinkVar`'s counters when the process exits (the
 * listener only reads the variable then, after the module has declared it), and `extra` lines
 * that stand for the user's own code (e.g. a throw) — each line marked as the test's, not the
 * README's, in compiler messages.
 */
export function instrumented(
  p: Program,
  name: string,
  sinkVar: string,
  extra: readonly string[] = [],
): Program {
  const preamble = [
    `process.on('exit', (code) => {`,
    `  const c = ${sinkVar}.snapshot();`,
    `  const r = { code, accepted: c.accepted, written: c.written, deadLettered: c.deadLettered, pendingRecords: c.pendingRecords, backpressureWaits: c.backpressureWaits, state: c.state };`,
    `  process.stdout.write('\\n${REPORT_PREFIX}' + JSON.stringify(r) + '\\n');`,
    `});`,
    ...extra,
  ];
  return {
    name,
    source: `${preamble.join('\n')}\n${p.source}`,
    origin: [...preamble.map((_, i) => `(test preamble of ${name}):${i + 1}`), ...p.origin],
  };
}

/** A program with one exact piece of text replaced; throws unless it occurs exactly once. */
export function replaced(p: Program, name: string, from: string, to: string): Program {
  const parts = p.source.split(from);
  if (parts.length !== 2)
    throw new Error(`${p.name}: expected ${JSON.stringify(from)} exactly once, found ${parts.length - 1}`);
  return { name, source: parts.join(to), origin: p.origin };
}

export interface Run {
  child: ChildProcess;
  /** Resolves when the process has exited, with everything it printed. */
  done: Promise<RunResult>;
}

export interface RunResult {
  code: number | null;
  signal: NodeJS.Signals | null;
  stdout: string;
  stderr: string;
  /** The preamble's counters; undefined when the process died without running 'exit' listeners. */
  report: ExitReport | undefined;
}

export function startProgram(js: string, options: { cwd: string; env: Record<string, string> }): Run {
  const child = spawn(process.execPath, [js], {
    cwd: options.cwd,
    env: { PATH: process.env.PATH ?? '', ...options.env },
    stdio: ['pipe', 'pipe', 'pipe'],
  });
  let stdout = '';
  let stderr = '';
  child.stdout!.setEncoding('utf8').on('data', (d: string) => {
    stdout += d;
  });
  child.stderr!.setEncoding('utf8').on('data', (d: string) => {
    stderr = (stderr + d).slice(-20_000);
  });
  // The test may still be writing to stdin when the program exits.
  child.stdin!.on('error', () => undefined);
  const done = new Promise<RunResult>((resolve) => {
    child.once('close', (code, signal) => {
      const line = stdout.split('\n').find((l) => l.startsWith(REPORT_PREFIX));
      const report = line ? (JSON.parse(line.slice(REPORT_PREFIX.length)) as ExitReport) : undefined;
      resolve({ code, signal, stdout, stderr, report });
    });
  });
  return { child, done };
}

/**
 * Polls `reached` until it is true; fails if the program exits first or `timeoutMs` passes. Used
 * to send a signal once the program is mid-stream (its first rows are in the store).
 */
export async function whileRunning(
  run: Run,
  what: string,
  reached: () => Promise<boolean>,
  timeoutMs = 120_000,
): Promise<void> {
  const deadline = Date.now() + timeoutMs;
  for (;;) {
    if (run.child.exitCode !== null || run.child.signalCode !== null)
      throw new Error(`the program ended before ${what}: ${describeRun(await run.done)}`);
    if (Date.now() > deadline) throw new Error(`no ${what} within ${timeoutMs / 1000} s`);
    if (await reached()) return;
    await sleep(50);
  }
}

/** What to show when a run did not end as expected. */
export function describeRun(r: RunResult): string {
  return `exit ${r.code ?? r.signal}; stdout: ${r.stdout.slice(-1500)}\nstderr: ${r.stderr.slice(-3000)}`;
}
