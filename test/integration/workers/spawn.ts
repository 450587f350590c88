// The test side of bridge-worker.ts: spawns a worker process, follows its JSON lines, and stops it
// with SIGTERM (graceful) or SIGKILL.
import { type ChildProcess, spawn } from 'node:child_process';
import { createInterface } from 'node:readline';
import { fileURLToPath } from 'node:url';
import type { WorkerConfig } from './bridge-worker.js';

const bridgeWorker = fileURLToPath(new URL('./bridge-worker.ts', import.meta.url));
const tsconfig = fileURLToPath(new URL('./tsconfig.json', import.meta.url));

export interface WorkerLine {
  event: string;
  label: string;
  pid: number;
  t: number;
  [key: string]: unknown;
}

export interface Worker {
  readonly label: string;
  readonly child: ChildProcess;
  readonly lines: WorkerLine[];
  /** The latest `assign` event's partitions. */
  assigned(): string[];
  /** Resolves with the first line (from now or already seen) that matches. */
  waitFor(what: string, match: (line: WorkerLine) => boolean, timeoutMs?: number): Promise<WorkerLine>;
  /** Resolves with the exit code / signal. */
  exited: Promise<{ code: number | null; signal: NodeJS.Signals | null }>;
  stderr(): string;
}

/** Starts a worker process: bridge-worker.ts, or another `script` that reads BRIDGE_WORKER. */
export function startWorker(config: WorkerConfig | { label: string }, script = bridgeWorker): Worker {
  const child = spawn(process.execPath, ['--import', 'tsx', script], {
    env: { ...process.env, TSX_TSCONFIG_PATH: tsconfig, BRIDGE_WORKER: JSON.stringify(config) },
    stdio: ['ignore', 'pipe', 'pipe'],
  });
  const lines: WorkerLine[] = [];
  const waiters = new Set<{ match: (l: WorkerLine) => boolean; resolve: (l: WorkerLine) => void }>();
  let err = '';
  child.stderr!.on('data', (d: Buffer) => {
    err = (err + d.toString()).slice(-20_000);
  });
  createInterface({ input: child.stdout! }).on('line', (text) => {
    let line: WorkerLine;
    try {
      line = JSON.parse(text) as WorkerLine;
    } catch {
      return;
    }
    lines.push(line);
    for (const w of [...waiters]) {
      if (w.match(line)) {
        waiters.delete(w);
        w.resolve(line);
      }
    }
  });
  const exited = new Promise<{ code: number | null; signal: NodeJS.Signals | null }>((resolve) =>
    child.once('exit', (code, signal) => resolve({ code, signal })),
  );
  return {
    label: config.label,
    child,
    lines,
    assigned() {
      const last = lines.filter((l) => l.event === 'assign').at(-1);
      return (last?.assigned as string[] | undefined) ?? [];
    },
    waitFor(what, match, timeoutMs = 60_000) {
      const seen = lines.find(match);
      if (seen) return Promise.resolve(seen);
      return new Promise<WorkerLine>((resolve, reject) => {
        const w = {
          match,
          resolve: (l: WorkerLine) => {
            clearTimeout(timer);
            resolve(l);
          },
        };
        const timer = setTimeout(() => {
          waiters.delete(w);
          reject(new Error(`worker ${config.label}: timed out waiting for ${what}\n${err.slice(-3000)}`));
        }, timeoutMs);
        waiters.add(w);
        void exited.then(({ code, signal }) => {
          if (!waiters.has(w)) return;
          waiters.delete(w);
          clearTimeout(timer);
          reject(
            new Error(
              `worker ${config.label} exited (${code ?? signal}) while waiting for ${what}\n${err.slice(-3000)}`,
            ),
          );
        });
      });
    },
    exited,
    stderr: () => err,
  };
}

/** The last `stats` line's message count. */
export function messagesTaken(w: Worker): number {
  const last = w.lines.filter((l) => l.event === 'stats').at(-1);
  return (last?.messages as number | undefined) ?? 0;
}

/**
 * Whether `workers` own every one of `partitions` partitions once, worker i owning `sizes[i]` of
 * them (by their latest `assign` events); undefined otherwise, for `waitFor`.
 */
export function ownsSplit(workers: Worker[], partitions: number, sizes: number[]): true | undefined {
  const all = workers.flatMap((w) => w.assigned()).sort();
  return all.length === partitions &&
    new Set(all).size === partitions &&
    workers.every((w, i) => w.assigned().length === sizes[i])
    ? true
    : undefined;
}
