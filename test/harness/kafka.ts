// A real single-node Apache Kafka broker (KRaft, combined broker + controller) for the tests,
// run with `java` straight from the broker's Maven Central jars: no Docker, no tarball download.
import { type ChildProcess, spawn } from 'node:child_process';
import { randomBytes } from 'node:crypto';
import {
  closeSync,
  existsSync,
  mkdirSync,
  mkdtempSync,
  openSync,
  readFileSync,
  renameSync,
  rmSync,
  statSync,
  writeFileSync,
} from 'node:fs';
import { homedir, tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { Kafka, logLevel } from 'kafkajs';
import {
  exited,
  fileContains,
  freePort,
  onProcessExit,
  run,
  signalGroup,
  sleep,
  stopGroup,
  tail,
  waitFor,
  withParentDeathSignal,
} from './process.js';

/**
 * The pinned broker. The 3.9 line still accepts every request version that kafkajs 2.2.4 sends
 * (4.0 removed old protocol versions); the smoke test proves produce, group consume, commit and
 * rebalance against it. Keep in step with <kafka.version> in test/kafka/pom.xml, whose logging
 * backend (reload4j) also only fits the 3.x line.
 */
export const KAFKA_VERSION = '3.9.1';

const kafkaDir = fileURLToPath(new URL('../kafka/', import.meta.url));
const READY_LINE = 'Kafka Server started';

export interface StartKafkaOptions {
  /** Milliseconds to wait for the broker to answer metadata requests. Default 90 s. */
  readyTimeoutMs?: number;
  /** Max heap in MiB. Default 512. */
  heapMb?: number;
  /**
   * Extra server.properties lines (key → value), applied after the template (a later line wins);
   * `{{BROKER_PORT}}` and `{{CONTROLLER_PORT}}` in them are filled in like the template's.
   */
  properties?: Record<string, string | number | boolean>;
  /** Short label used in the temp dir name and messages. */
  label?: string;
  /** SASL/PLAIN credentials the harness's readiness check logs in with (a broker with SASL listeners). */
  sasl?: { username: string; password: string };
}

export interface KafkaBroker {
  /** Bootstrap addresses for kafkajs, e.g. ['127.0.0.1:41234']. */
  readonly brokers: string[];
  /** The broker's combined stdout/stderr, inside the run's data dir. */
  readonly logFile: string;
  readonly dataDir: string;
  /** Milliseconds from `java` spawn to the first successful describeCluster, for the last start. */
  readonly lastStartMs: number;
  /** Whether the jars had to be fetched with Maven for this start (a cold cache). */
  readonly fetchedJars: boolean;
  /** Graceful stop (SIGTERM, SIGKILL after 20 s), then removes the data dir. Idempotent. */
  stop(): Promise<void>;
  /** SIGKILL the broker's process group, keeping the data dir for restart(). */
  kill(): Promise<void>;
  /** Starts again on the same ports and data dir (stopping it first if it still runs). */
  restart(): Promise<void>;
}

function cacheRoot(): string {
  return process.env.SPILLWAY_CACHE ?? join(homedir(), '.cache', 'spillway');
}

export function javaBin(): string {
  return process.env.JAVA_HOME ? join(process.env.JAVA_HOME, 'bin', 'java') : 'java';
}

/**
 * Makes sure the broker's runtime jars are in `<cache>/kafka-<version>/` and returns that folder.
 * The folder lives outside the repo so every clone and every run reuses it; it only counts once
 * its `.complete` marker exists, and is filled through a temp folder plus rename so that two test
 * runs fetching at once never leave a half-copied or mixed-version folder.
 */
export async function ensureKafkaJars(version = KAFKA_VERSION): Promise<{ dir: string; fetched: boolean }> {
  const dir = join(cacheRoot(), `kafka-${version}`);
  if (existsSync(join(dir, '.complete'))) return { dir, fetched: false };
  mkdirSync(cacheRoot(), { recursive: true });
  const staging = mkdtempSync(join(cacheRoot(), `.kafka-${version}-`));
  const args = [
    '-B',
    '-q',
    '-f',
    join(kafkaDir, 'pom.xml'),
    `-Dkafka.version=${version}`,
    'org.apache.maven.plugins:maven-dependency-plugin:3.8.1:copy-dependencies',
    '-DincludeScope=runtime',
    `-DoutputDirectory=${staging}`,
  ];
  try {
    try {
      // Offline first: after one fetch the local Maven repository has everything.
      await run('mvn', ['-o', ...args], { timeoutMs: 120_000 });
    } catch {
      process.stderr.write(
        `[spillway] fetching Apache Kafka ${version} jars with Maven (first run only)...\n`,
      );
      await run('mvn', args, { timeoutMs: 600_000 });
    }
    writeFileSync(join(staging, '.complete'), `${version}\n`);
    try {
      renameSync(staging, dir);
    } catch (error) {
      // Another run won the race; its folder is complete, so use it.
      if (!existsSync(join(dir, '.complete'))) throw error;
    }
  } catch (error) {
    const message = (error as Error).message;
    if (/ENOENT/.test(message) && /mvn/.test(message)) {
      throw new Error(
        'Apache Maven (mvn) and Java 17 are needed to fetch the test Kafka broker: install them ' +
          '(Debian: apt-get install maven openjdk-17-jdk-headless), or set SPILLWAY_KAFKA_BROKERS to an existing broker.',
      );
    }
    throw new Error(`could not fetch the Apache Kafka ${version} jars with Maven: ${message}`);
  } finally {
    rmSync(staging, { recursive: true, force: true });
  }
  return { dir, fetched: true };
}

/** A Kafka cluster id: 16 random bytes, base64url without padding, never starting with '-'. */
export function clusterId(): string {
  for (;;) {
    const id = randomBytes(16).toString('base64url');
    if (!id.startsWith('-')) return id;
  }
}

export function renderProperties(
  ports: { broker: number; controller: number },
  logDir: string,
  extra: StartKafkaOptions['properties'],
): string {
  let text = readFileSync(join(kafkaDir, 'server.properties.template'), 'utf8');
  for (const [key, value] of Object.entries(extra ?? {})) text += `${key}=${String(value)}\n`;
  // After the extras, so that they can name the ports too (a listener of their own).
  return text
    .replaceAll('{{BROKER_PORT}}', String(ports.broker))
    .replaceAll('{{CONTROLLER_PORT}}', String(ports.controller))
    .replaceAll('{{LOG_DIR}}', logDir);
}

export function jvmArgs(jarDir: string, heapMb: number): string[] {
  return [
    `-Xmx${heapMb}m`,
    `-Xms${Math.min(256, heapMb)}m`,
    // One test broker on two cores: serial GC and C1 only start faster and use less CPU.
    '-XX:+UseSerialGC',
    '-XX:TieredStopAtLevel=1',
    '-XX:+ExitOnOutOfMemoryError',
    '-Djava.awt.headless=true',
    `-Dlog4j.configuration=file:${resolve(kafkaDir, 'log4j.properties')}`,
    '-cp',
    `${jarDir}/*`,
  ];
}

/** Starts a fresh broker: free ports, a new data dir under the OS temp dir, formatted storage. */
export async function startKafka(options: StartKafkaOptions = {}): Promise<KafkaBroker> {
  const readyTimeoutMs = options.readyTimeoutMs ?? 90_000;
  const heapMb = options.heapMb ?? 512;
  const { dir: jarDir, fetched } = await ensureKafkaJars();
  const java = javaBin();

  // A port picked free can be taken by a parallel session before the broker binds it: retry
  // with new ports when the broker dies on startup.
  let lastError: unknown;
  for (let attempt = 1; attempt <= 3; attempt++) {
    const dataDir = mkdtempSync(join(tmpdir(), `spillway-kafka-${options.label ?? 'broker'}-`));
    const logFile = join(dataDir, 'broker.log');
    const ports = { broker: await freePort(), controller: await freePort() };
    if (ports.controller === ports.broker) ports.controller = await freePort();
    const propsFile = join(dataDir, 'server.properties');
    writeFileSync(propsFile, renderProperties(ports, join(dataDir, 'data'), options.properties));
    try {
      await formatStorage(java, jarDir, propsFile, clusterId());
    } catch (error) {
      rmSync(dataDir, { recursive: true, force: true });
      throw error;
    }

    const broker = new Broker({
      java,
      jarDir,
      heapMb,
      dataDir,
      logFile,
      propsFile,
      ports,
      readyTimeoutMs,
      fetched,
      sasl: options.sasl,
    });
    try {
      await broker.start();
      return broker;
    } catch (error) {
      lastError = error;
      const portClash = fileContains(logFile, 'Address already in use');
      await broker.stop();
      if (!portClash) throw error;
    }
  }
  throw lastError;
}

/** Formats a node's log dirs for KRaft (`kafka.tools.StorageTool format`). */
export async function formatStorage(
  java: string,
  jarDir: string,
  propsFile: string,
  id: string,
): Promise<void> {
  try {
    await run(
      java,
      [...jvmArgs(jarDir, 256), 'kafka.tools.StorageTool', 'format', '-t', id, '-c', propsFile],
      {
        timeoutMs: 60_000,
      },
    );
  } catch (error) {
    if (/ENOENT/.test((error as Error).message)) {
      throw new Error(
        `java was not found (${java}): install Java 17, set JAVA_HOME, or set SPILLWAY_KAFKA_BROKERS.`,
      );
    }
    throw error;
  }
}

export interface BrokerConfig {
  java: string;
  jarDir: string;
  heapMb: number;
  dataDir: string;
  logFile: string;
  propsFile: string;
  ports: { broker: number; controller: number };
  readyTimeoutMs: number;
  fetched: boolean;
  sasl: StartKafkaOptions['sasl'];
  /**
   * A node of a cluster: ready only once the metadata it serves lists this node id (a restarted
   * node stays fenced, and absent from metadata, until the controller takes it back).
   */
  nodeId?: number;
}

/** One broker JVM. `startKafka()` hands it out as a `KafkaBroker`; a cluster wraps several. */
export class Broker implements KafkaBroker {
  readonly brokers: string[];
  readonly logFile: string;
  readonly dataDir: string;
  readonly fetchedJars: boolean;
  lastStartMs = 0;
  private child: ChildProcess | undefined;
  private stopped = false;
  private readonly removeExitHook: () => void;

  constructor(private readonly config: BrokerConfig) {
    this.brokers = [`127.0.0.1:${config.ports.broker}`];
    this.logFile = config.logFile;
    this.dataDir = config.dataDir;
    this.fetchedJars = config.fetched;
    this.removeExitHook = onProcessExit(() => {
      if (this.child?.pid !== undefined && this.child.exitCode === null && this.child.signalCode === null) {
        signalGroup(this.child.pid, 'SIGKILL');
      }
      rmSync(this.dataDir, { recursive: true, force: true });
    });
  }

  async start(): Promise<void> {
    const { java, jarDir, heapMb, logFile, propsFile, readyTimeoutMs } = this.config;
    const started = Date.now();
    // The log is appended across restarts: look for the ready line only past this start.
    const logOffset = existsSync(logFile) ? statSync(logFile).size : 0;
    const fd = openSync(logFile, 'a');
    // detached: the JVM leads its own process group, so kill() reaches all of it.
    const [command, args] = withParentDeathSignal(java, [
      ...jvmArgs(jarDir, heapMb),
      'kafka.Kafka',
      propsFile,
    ]);
    const child = spawn(command, args, {
      detached: true,
      stdio: ['ignore', fd, fd],
    });
    closeSync(fd);
    child.unref();
    this.child = child;
    const spawnError = new Promise<never>((_, reject) => child.once('error', reject));
    spawnError.catch(() => undefined);

    const deadline = started + readyTimeoutMs;
    const fail = (why: string) =>
      new Error(`Kafka broker on ${this.brokers[0]} ${why}. Last lines of ${logFile}:\n${tail(logFile, 40)}`);

    // Readiness 1: the broker's own log line (listeners are bound).
    for (;;) {
      if (child.exitCode !== null || child.signalCode !== null)
        throw fail(`exited (${child.exitCode ?? child.signalCode}) during startup`);
      if (fileContains(logFile, READY_LINE, logOffset)) break;
      if (Date.now() > deadline) throw fail(`did not log "${READY_LINE}" within ${readyTimeoutMs} ms`);
      await Promise.race([sleep(150), spawnError]);
    }
    // Readiness 2: a metadata round trip through the same client library the tests use.
    const sasl = this.config.sasl;
    const kafka = new Kafka({
      clientId: 'spillway-harness-ready',
      brokers: this.brokers,
      logLevel: logLevel.NOTHING,
      retry: { retries: 0 },
      ...(sasl ? { sasl: { mechanism: 'plain' as const, ...sasl } } : {}),
    });
    const admin = kafka.admin();
    try {
      await waitFor(
        `describeCluster on ${this.brokers[0]}`,
        async () => {
          if (child.exitCode !== null || child.signalCode !== null)
            throw fail('exited while waiting for metadata');
          await admin.connect();
          const cluster = await admin.describeCluster();
          const nodeId = this.config.nodeId;
          const listed =
            nodeId === undefined
              ? cluster.brokers.length > 0
              : cluster.brokers.some((b) => b.nodeId === nodeId);
          return listed ? true : undefined;
        },
        { timeoutMs: Math.max(5_000, deadline - Date.now()), intervalMs: 250 },
      );
    } catch (error) {
      throw fail(`did not answer metadata requests: ${(error as Error).message}`);
    } finally {
      await admin.disconnect().catch(() => undefined);
    }
    this.lastStartMs = Date.now() - started;
  }

  async kill(): Promise<void> {
    const child = this.child;
    if (child?.pid === undefined || child.exitCode !== null || child.signalCode !== null) return;
    signalGroup(child.pid, 'SIGKILL');
    await exited(child);
  }

  /** Whether the JVM is running (started and not yet exited). */
  get running(): boolean {
    const child = this.child;
    return child?.pid !== undefined && child.exitCode === null && child.signalCode === null;
  }

  /** The JVM's process id while it runs. */
  get pid(): number | undefined {
    return this.running ? this.child?.pid : undefined;
  }

  /** Graceful stop (SIGTERM: a controlled shutdown; SIGKILL after 20 s), keeping the data dir. */
  async halt(): Promise<void> {
    if (this.child) await stopGroup(this.child, 20_000);
  }

  async restart(): Promise<void> {
    if (this.stopped) throw new Error('restart() after stop(): the data dir is gone; start a new broker');
    if (this.child && this.child.exitCode === null && this.child.signalCode === null)
      await stopGroup(this.child, 20_000);
    await this.start();
  }

  async stop(): Promise<void> {
    if (this.stopped) return;
    this.stopped = true;
    if (this.child) await stopGroup(this.child, 20_000);
    this.removeExitHook();
    rmSync(this.dataDir, { recursive: true, force: true });
  }
}
