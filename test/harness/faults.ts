// Private servers for fault tests. Restarting the SHARED PostgreSQL or Redis would break the
// test files running beside a fault test, so every outage is staged on an instance of its own:
// its own data dir under the OS temp dir, its own free port on 127.0.0.1.
import { type ChildProcess, spawn } from 'node:child_process';
import {
  chmodSync,
  chownSync,
  closeSync,
  existsSync,
  mkdtempSync,
  openSync,
  readdirSync,
  rmSync,
} from 'node:fs';
import { tmpdir, userInfo } from 'node:os';
import { join } from 'node:path';
import { type KafkaBroker, type StartKafkaOptions, startKafka } from './kafka.js';
import {
  freePort,
  onProcessExit,
  run,
  runSyncQuiet,
  signalGroup,
  sleep,
  stopGroup,
  tail,
  waitFor,
  withParentDeathSignal,
} from './process.js';
import { probeRedis } from './services.js';

export interface PrivateServer {
  url: string;
  port: number;
  /** Stops the server for good and removes its files. Idempotent. */
  stop(): Promise<void>;
  /**
   * Stops the server, keeps it down for `downMs`, then starts it again on the same port.
   * Resolves once it answers again.
   */
  restart(options?: { downMs?: number }): Promise<void>;
  /** Server log, for failure messages. */
  logFile: string;
}

// ---------------------------------------------------------------------------------------------
// PostgreSQL

function postgresBinDir(): string {
  if (process.env.SPILLWAY_PG_BIN) return process.env.SPILLWAY_PG_BIN;
  let versions: string[] = [];
  try {
    versions = readdirSync('/usr/lib/postgresql').filter((v) => /^\d+$/.test(v));
  } catch {
    // Not a Debian layout.
  }
  const newest = versions.sort((a, b) => Number(b) - Number(a))[0];
  const dir = newest === undefined ? undefined : join('/usr/lib/postgresql', newest, 'bin');
  if (dir === undefined || !existsSync(join(dir, 'initdb'))) {
    throw new Error(
      'startPrivatePostgres needs the PostgreSQL server binaries (initdb, pg_ctl) under /usr/lib/postgresql/<version>/bin ' +
        '(Debian: apt-get install postgresql), or SPILLWAY_PG_BIN set to the folder that holds them.',
    );
  }
  return dir;
}

/** PostgreSQL refuses to run as root: as root, run its tools as the `postgres` OS user. */
async function postgresIdentity(): Promise<{ uid?: number; gid?: number }> {
  if (userInfo().uid !== 0) return {};
  try {
    const uid = Number((await run('id', ['-u', 'postgres'])).stdout.trim());
    const gid = Number((await run('id', ['-g', 'postgres'])).stdout.trim());
    return { uid, gid };
  } catch {
    throw new Error(
      "running as root, startPrivatePostgres needs a `postgres` OS user (it comes with Debian's postgresql package).",
    );
  }
}

/** A throwaway PostgreSQL cluster (trust auth, no fsync) on a free port; database `postgres`. */
export async function startPrivatePostgres(): Promise<PrivateServer> {
  const bin = postgresBinDir();
  const who = await postgresIdentity();
  const root = mkdtempSync(join(tmpdir(), 'spillway-pg-'));
  // mkdtemp makes a 0700 root-owned folder: hand it to the postgres user, which needs to write
  // the data dir, the socket and the log there. os.tmpdir() itself is world-traversable.
  if (who.uid !== undefined && who.gid !== undefined) chownSync(root, who.uid, who.gid);
  chmodSync(root, 0o700);
  const dataDir = join(root, 'data');
  const logFile = join(root, 'postgres.log');
  const pgCtl = join(bin, 'pg_ctl');

  const cleanup = () => {
    runSyncQuiet(pgCtl, ['-D', dataDir, '-m', 'immediate', '-w', 'stop'], who.uid, who.gid);
    rmSync(root, { recursive: true, force: true });
  };
  const removeExitHook = onProcessExit(cleanup);

  try {
    await run(
      join(bin, 'initdb'),
      ['-D', dataDir, '-U', 'postgres', '--auth=trust', '-E', 'UTF8', '--no-sync', '--no-instructions'],
      {
        ...who,
        cwd: root,
        timeoutMs: 120_000,
      },
    );
  } catch (error) {
    removeExitHook();
    cleanup();
    throw error;
  }

  let port = await freePort();
  const serverOptions = () =>
    [
      `-p ${port}`,
      '-c listen_addresses=127.0.0.1',
      `-c unix_socket_directories=${root}`,
      // Test data is throwaway: skip the disk syncs that make a restart slow.
      '-c fsync=off',
      '-c synchronous_commit=off',
      '-c full_page_writes=off',
      '-c max_connections=40',
      '-c shared_buffers=32MB',
    ].join(' ');
  const start = () =>
    run(pgCtl, ['-D', dataDir, '-l', logFile, '-o', serverOptions(), '-w', '-t', '60', 'start'], {
      ...who,
      cwd: root,
      timeoutMs: 90_000,
    });
  const stopFast = () =>
    run(pgCtl, ['-D', dataDir, '-m', 'fast', '-w', '-t', '60', 'stop'], {
      ...who,
      cwd: root,
      timeoutMs: 90_000,
    });

  // A parallel session can take the port between freePort() and the bind: try a new one.
  for (let attempt = 1; ; attempt++) {
    try {
      await start();
      break;
    } catch (error) {
      if (attempt >= 3) {
        removeExitHook();
        cleanup();
        throw new Error(
          `private PostgreSQL did not start: ${(error as Error).message}\n${tail(logFile, 30)}`,
        );
      }
      port = await freePort();
    }
  }

  let stopped = false;
  const server: PrivateServer = {
    get url() {
      return `postgres://postgres@127.0.0.1:${port}/postgres`;
    },
    get port() {
      return port;
    },
    logFile,
    async restart({ downMs = 0 } = {}) {
      await stopFast();
      await sleep(downMs);
      try {
        await start();
      } catch (error) {
        throw new Error(
          `private PostgreSQL did not come back on port ${port}: ${(error as Error).message}\n${tail(logFile, 30)}`,
        );
      }
    },
    async stop() {
      if (stopped) return;
      stopped = true;
      await stopFast().catch(() => undefined);
      removeExitHook();
      rmSync(root, { recursive: true, force: true });
    },
  };
  return server;
}

// ---------------------------------------------------------------------------------------------
// Redis

/** A throwaway redis-server (no persistence: a restart empties it) on a free port. */
export async function startPrivateRedis(): Promise<PrivateServer> {
  const root = mkdtempSync(join(tmpdir(), 'spillway-redis-'));
  const logFile = join(root, 'redis.log');
  let port = await freePort();
  let child: ChildProcess | undefined;
  const url = () => `redis://127.0.0.1:${port}`;

  const removeExitHook = onProcessExit(() => {
    if (child?.pid !== undefined && child.exitCode === null && child.signalCode === null)
      signalGroup(child.pid, 'SIGKILL');
    rmSync(root, { recursive: true, force: true });
  });

  const start = async () => {
    const fd = openSync(logFile, 'a');
    const [command, args] = withParentDeathSignal('redis-server', [
      '--port',
      String(port),
      '--bind',
      '127.0.0.1',
      '--save',
      '',
      '--appendonly',
      'no',
      '--daemonize',
      'no',
      '--dir',
      root,
    ]);
    const proc = spawn(command, args, { detached: true, stdio: ['ignore', fd, fd] });
    closeSync(fd);
    proc.unref();
    child = proc;
    const spawnFailed = new Promise<Error>((resolve) => proc.once('error', resolve));
    const error = await Promise.race([
      spawnFailed,
      waitFor(
        `redis-server on ${port}`,
        async () => {
          if (proc.exitCode !== null) throw new Error(`redis-server exited (${proc.exitCode})`);
          return (await probeRedis(url(), 500)) === undefined ? true : undefined;
        },
        { timeoutMs: 15_000, intervalMs: 50 },
      ).then(
        () => undefined,
        (e: Error) => e,
      ),
    ]);
    if (error !== undefined) {
      if (proc.exitCode === null) await stopGroup(proc, 2000);
      if (/ENOENT/.test(error.message))
        throw new Error(
          'startPrivateRedis needs redis-server on PATH (Debian: apt-get install redis-server).',
        );
      throw new Error(`private Redis did not start on port ${port}: ${error.message}\n${tail(logFile, 20)}`);
    }
  };

  for (let attempt = 1; ; attempt++) {
    try {
      await start();
      break;
    } catch (error) {
      if (attempt >= 3 || /needs redis-server/.test((error as Error).message)) {
        removeExitHook();
        rmSync(root, { recursive: true, force: true });
        throw error;
      }
      port = await freePort();
    }
  }

  let stopped = false;
  return {
    get url() {
      return url();
    },
    get port() {
      return port;
    },
    logFile,
    async restart({ downMs = 0 } = {}) {
      if (child) await stopGroup(child, 5000);
      await sleep(downMs);
      await start();
    },
    async stop() {
      if (stopped) return;
      stopped = true;
      if (child) await stopGroup(child, 5000);
      removeExitHook();
      rmSync(root, { recursive: true, force: true });
    },
  };
}

// ---------------------------------------------------------------------------------------------
// Kafka

/**
 * A broker of the test's own, for kill()/restart() faults; the shared one must stay up.
 * Remember `await broker.stop()` in afterAll.
 */
export function startPrivateKafka(options: StartKafkaOptions = {}): Promise<KafkaBroker> {
  return startKafka({ label: 'private', ...options });
}
