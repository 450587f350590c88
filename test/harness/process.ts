// Small process and socket utilities shared by the service starters.
import { type ChildProcess, execFile, spawnSync } from 'node:child_process';
import { closeSync, existsSync, fstatSync, openSync, readFileSync, readSync } from 'node:fs';
import { createServer, Socket } from 'node:net';
import { setTimeout as sleep } from 'node:timers/promises';

export { sleep };

/**
 * Asks the kernel for a free TCP port on 127.0.0.1. Another process can still take it before the
 * caller binds it (parallel sessions share this machine), so starters retry with a new port when
 * the bind fails.
 */
export async function freePort(): Promise<number> {
  return new Promise((resolve, reject) => {
    const server = createServer();
    server.unref();
    server.once('error', reject);
    server.listen(0, '127.0.0.1', () => {
      const address = server.address();
      if (address === null || typeof address === 'string') {
        server.close();
        reject(new Error('could not read the port of a probe socket'));
        return;
      }
      const { port } = address;
      server.close(() => resolve(port));
    });
  });
}

/** Resolves true when something accepts a TCP connection on host:port within timeoutMs. */
export function tcpOpen(host: string, port: number, timeoutMs = 1000): Promise<boolean> {
  return new Promise((resolve) => {
    const socket = new Socket();
    const done = (ok: boolean) => {
      socket.destroy();
      resolve(ok);
    };
    socket.setTimeout(timeoutMs, () => done(false));
    socket.once('error', () => done(false));
    socket.connect(port, host, () => done(true));
  });
}

/** Last `lines` lines of a text file, or a note when it cannot be read. Reads at most 64 KiB. */
export function tail(file: string, lines = 40): string {
  try {
    const fd = openSync(file, 'r');
    try {
      const size = fstatSync(fd).size;
      const length = Math.min(size, 64 * 1024);
      const buffer = Buffer.alloc(length);
      readSync(fd, buffer, 0, length, size - length);
      return buffer
        .toString('utf8')
        .split('\n')
        .slice(-lines - 1)
        .join('\n');
    } finally {
      closeSync(fd);
    }
  } catch (error) {
    return `(cannot read ${file}: ${(error as Error).message})`;
  }
}

/** Whether the file contains `needle` at or after byte `fromOffset`. */
export function fileContains(file: string, needle: string, fromOffset = 0): boolean {
  try {
    return readFileSync(file).subarray(fromOffset).toString('utf8').includes(needle);
  } catch {
    return false;
  }
}

/** Runs a command to completion; rejects with its output when it exits non-zero. */
export function run(
  command: string,
  args: readonly string[],
  options: { cwd?: string; uid?: number; gid?: number; timeoutMs?: number; env?: NodeJS.ProcessEnv } = {},
): Promise<{ stdout: string; stderr: string }> {
  return new Promise((resolve, reject) => {
    execFile(
      command,
      args,
      {
        cwd: options.cwd,
        uid: options.uid,
        gid: options.gid,
        env: options.env ?? process.env,
        timeout: options.timeoutMs ?? 120_000,
        maxBuffer: 16 * 1024 * 1024,
      },
      (error, stdout, stderr) => {
        if (error) {
          const detail = `${stdout}\n${stderr}`.trim().split('\n').slice(-30).join('\n');
          reject(new Error(`${command} ${args.join(' ')} failed: ${error.message}\n${detail}`));
          return;
        }
        resolve({ stdout, stderr });
      },
    );
  });
}

/** Resolves when the child has exited (at once if it already has). */
export function exited(child: ChildProcess): Promise<void> {
  if (child.exitCode !== null || child.signalCode !== null) return Promise.resolve();
  // Children are unref'd so a forgotten server never holds the test process open; a ref'd
  // timer keeps the event loop alive while someone is actually waiting for the exit.
  const keepAlive = setInterval(() => undefined, 1000);
  return new Promise((resolve) =>
    child.once('exit', () => {
      clearInterval(keepAlive);
      resolve();
    }),
  );
}

/** Signals a whole process group (the child was spawned detached, so it leads its own group). */
export function signalGroup(pid: number, signal: NodeJS.Signals): void {
  try {
    process.kill(-pid, signal);
  } catch {
    // Already gone.
  }
}

/**
 * Stops a detached child: SIGTERM to its group, then SIGKILL after graceMs. Resolves once it
 * has exited.
 */
export async function stopGroup(child: ChildProcess, graceMs: number): Promise<void> {
  // Never signal a group whose leader is gone: the pid may belong to someone else by now.
  if (child.pid === undefined || child.exitCode !== null || child.signalCode !== null) return;
  const gone = exited(child);
  signalGroup(child.pid, 'SIGTERM');
  const timer = setTimeout(() => {
    if (child.pid !== undefined) signalGroup(child.pid, 'SIGKILL');
  }, graceMs);
  await gone;
  clearTimeout(timer);
}

/**
 * Last-resort cleanup when the test process exits without running teardown (a crash, an
 * uncaught error). Only synchronous work is possible in an 'exit' listener.
 */
const exitHooks = new Set<() => void>();
let exitListenerInstalled = false;

export function onProcessExit(hook: () => void): () => void {
  if (!exitListenerInstalled) {
    exitListenerInstalled = true;
    process.once('exit', () => {
      for (const h of exitHooks) {
        try {
          h();
        } catch {
          // Best effort: keep running the other hooks.
        }
      }
    });
  }
  exitHooks.add(hook);
  return () => exitHooks.delete(hook);
}

/** Polls `check` until it returns a value other than undefined, or throws after timeoutMs. */
export async function waitFor<T>(
  what: string,
  check: () => Promise<T | undefined> | T | undefined,
  { timeoutMs, intervalMs = 200 }: { timeoutMs: number; intervalMs?: number },
): Promise<T> {
  const deadline = Date.now() + timeoutMs;
  let lastError: unknown;
  for (;;) {
    try {
      const value = await check();
      if (value !== undefined) return value;
    } catch (error) {
      lastError = error;
    }
    if (Date.now() >= deadline) {
      const reason = lastError instanceof Error ? ` (last error: ${lastError.message})` : '';
      throw new Error(`timed out after ${timeoutMs} ms waiting for ${what}${reason}`);
    }
    await sleep(intervalMs);
  }
}

/** Synchronous variant of `run` for exit hooks; ignores failures. */
export function runSyncQuiet(command: string, args: readonly string[], uid?: number, gid?: number): void {
  spawnSync(command, args, { stdio: 'ignore', uid, gid, timeout: 10_000 });
}

/**
 * Wraps a long-running server command so that the kernel sends it SIGTERM when the process that
 * spawned it dies without cleaning up (a test runner killed with SIGKILL or SIGTERM, where no
 * 'exit' listener runs). Uses util-linux `setpriv`, which execs the command in place: the
 * spawned pid stays the server's own. Without setpriv the command is returned unchanged.
 */
export function withParentDeathSignal(command: string, args: readonly string[]): [string, string[]] {
  if (process.platform !== 'linux' || !existsSync('/usr/bin/setpriv')) return [command, [...args]];
  return ['/usr/bin/setpriv', ['--pdeathsig', 'TERM', '--', command, ...args]];
}
