// A real three-node Apache Kafka cluster (KRaft) for the failover tests, started from the same
// cached jars as the single test broker. Each node is a combined broker + controller, and the
// three controllers form the voter quorum: three JVMs rather than four, and losing any one node
// leaves a quorum of two and two in-sync replicas of every partition.
import { mkdirSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { type Admin, Kafka, logLevel } from 'kafkajs';
import {
  Broker,
  clusterId,
  ensureKafkaJars,
  formatStorage,
  javaBin,
  renderProperties,
  type StartKafkaOptions,
} from './kafka.js';
import { fileContains, freePort, onProcessExit, waitFor } from './process.js';

export interface StartKafkaClusterOptions {
  /** Number of nodes, each a broker and a controller voter. Default 3. */
  brokers?: number;
  /** Max heap of each node in MiB. Default 320. */
  heapMb?: number;
  /** `min.insync.replicas` of every topic, internal ones included. Default 2. */
  minInsyncReplicas?: number;
  /** Milliseconds to wait for every node to be ready. Default 120 s. */
  readyTimeoutMs?: number;
  /** Extra server.properties lines for every node (see `StartKafkaOptions.properties`). */
  properties?: StartKafkaOptions['properties'];
  /** Short label used in the temp dir name. */
  label?: string;
}

export interface KafkaClusterNode {
  /** The node's `node.id` (1-based), as topic metadata names leaders and replicas. */
  readonly nodeId: number;
  /** Its broker listener, e.g. '127.0.0.1:41234'. */
  readonly address: string;
  /** The node's combined stdout/stderr. */
  readonly logFile: string;
  /** Whether its JVM is running. */
  readonly running: boolean;
  /** Milliseconds from `java` spawn to the node being listed in metadata, for its last start. */
  readonly lastStartMs: number;
  /** SIGKILL: no controlled shutdown, leadership moves only once the controller fences the node. */
  kill(): Promise<void>;
  /** Graceful stop (SIGTERM: controlled shutdown, leadership handed over first), keeping its data. */
  stop(): Promise<void>;
  /** Starts it again on the same ports and data; resolves once it is back in the cluster's metadata. */
  restart(): Promise<void>;
  /** Resident memory of its JVM in bytes (Linux /proc), or undefined when it is not running. */
  residentBytes(): number | undefined;
}

/** Whether the node at `address` itself answers metadata for `topics` with a leader everywhere. */
async function knowsTopics(address: string, topics: readonly string[]): Promise<boolean> {
  // A fresh client with this node alone as its seed sends its metadata requests to this node.
  const admin = new Kafka({
    clientId: 'spillway-harness-metadata',
    brokers: [address],
    logLevel: logLevel.NOTHING,
    retry: { retries: 0 },
  }).admin();
  try {
    await admin.connect();
    const { topics: found } = await admin.fetchTopicMetadata({ topics: [...topics] });
    return (
      found.length === topics.length &&
      found.every((t) => t.partitions.length > 0 && t.partitions.every((p) => p.leader >= 0))
    );
  } catch {
    return false;
  } finally {
    await admin.disconnect().catch(() => undefined);
  }
}

export interface KafkaCluster {
  /** Bootstrap addresses of every node. */
  readonly brokers: string[];
  readonly nodes: readonly KafkaClusterNode[];
  /** Holds one sub-dir per node (data and log). */
  readonly dataDir: string;
  /** Milliseconds from formatting the nodes' storage to every node being ready. */
  readonly startMs: number;
  /** The node with this `node.id`. */
  node(nodeId: number): KafkaClusterNode;
  /** Creates a topic replicated on every node and waits until each partition has its full ISR. */
  createTopic(name: string, partitions?: number): Promise<string>;
  /** The node that leads `topic`/`partition` according to the cluster's metadata now. */
  leaderOf(topic: string, partition: number): Promise<KafkaClusterNode>;
  /** SIGKILLs the leader of `topic`/`partition` and returns it (restart it with `restart()`). */
  killLeaderOf(topic: string, partition: number): Promise<KafkaClusterNode>;
  /** Waits until `topic`/`partition` is led by a running node other than `formerLeader`. */
  waitForNewLeader(
    topic: string,
    partition: number,
    formerLeader: KafkaClusterNode,
  ): Promise<KafkaClusterNode>;
  /** Waits until every partition of the topics has all its replicas in sync (after a restart). */
  waitForFullIsr(topics: readonly string[], timeoutMs?: number): Promise<void>;
  /** An admin client of the harness's own (connected), for more metadata questions. */
  readonly admin: Admin;
  /** SIGKILLs every node (the data is thrown away, so no controlled shutdown) and removes the dir. */
  stop(): Promise<void>;
}

/** Bytes of VmRSS in /proc/<pid>/status, or undefined. */
function residentBytes(pid: number | undefined): number | undefined {
  if (pid === undefined) return undefined;
  try {
    const match = /^VmRSS:\s+(\d+) kB$/m.exec(readFileSync(`/proc/${pid}/status`, 'utf8'));
    return match ? Number(match[1]) * 1024 : undefined;
  } catch {
    return undefined;
  }
}

function clusterProperties(
  nodeId: number,
  voters: string,
  replicas: number,
  minIsr: number,
  extra: StartKafkaClusterOptions['properties'],
): Record<string, string | number | boolean> {
  return {
    'node.id': nodeId,
    'controller.quorum.voters': voters,
    // Every topic and the internal ones (group offsets, transaction state) on every node, and a
    // write acknowledged only by two of them: a single node lost loses nothing acknowledged.
    'default.replication.factor': replicas,
    'min.insync.replicas': minIsr,
    'offsets.topic.replication.factor': replicas,
    'transaction.state.log.replication.factor': replicas,
    'transaction.state.log.min.isr': minIsr,
    ...extra,
  };
}

/**
 * Starts a fresh cluster: free loopback ports (a broker and a controller port per node), a new
 * dir under the OS temp dir, formatted storage, the nodes started together (a combined node's
 * startup waits for the quorum). Resolves once every node is listed in the cluster's metadata.
 */
export async function startKafkaCluster(options: StartKafkaClusterOptions = {}): Promise<KafkaCluster> {
  const count = options.brokers ?? 3;
  const heapMb = options.heapMb ?? 320;
  const minIsr = options.minInsyncReplicas ?? 2;
  const readyTimeoutMs = options.readyTimeoutMs ?? 120_000;
  if (!Number.isInteger(count) || count < 1)
    throw new TypeError(`brokers must be an integer ≥ 1, got ${count}`);
  if (minIsr > count) throw new TypeError(`minInsyncReplicas (${minIsr}) exceeds brokers (${count})`);
  const { dir: jarDir, fetched } = await ensureKafkaJars();
  const java = javaBin();

  // A port picked free can be taken by a parallel run before a node binds it: retry with new ports.
  let lastError: unknown;
  for (let attempt = 1; attempt <= 3; attempt++) {
    const root = mkdtempSync(join(tmpdir(), `spillway-kafka-${options.label ?? 'cluster'}-`));
    const removeExitHook = onProcessExit(() => rmSync(root, { recursive: true, force: true }));
    const ports: Array<{ broker: number; controller: number }> = [];
    const taken = new Set<number>();
    const pick = async () => {
      for (;;) {
        const port = await freePort();
        if (!taken.has(port)) {
          taken.add(port);
          return port;
        }
      }
    };
    for (let i = 0; i < count; i++) ports.push({ broker: await pick(), controller: await pick() });
    const voters = ports.map((p, i) => `${i + 1}@127.0.0.1:${p.controller}`).join(',');
    const id = clusterId();

    const brokers: Broker[] = [];
    let cluster: Cluster | undefined;
    const started = Date.now();
    try {
      await Promise.all(
        ports.map(async (nodePorts, i) => {
          const nodeId = i + 1;
          const dataDir = join(root, `node-${nodeId}`);
          mkdirSync(dataDir);
          const propsFile = join(dataDir, 'server.properties');
          const extra = clusterProperties(nodeId, voters, count, minIsr, options.properties);
          writeFileSync(propsFile, renderProperties(nodePorts, join(dataDir, 'data'), extra));
          await formatStorage(java, jarDir, propsFile, id);
          brokers[i] = new Broker({
            java,
            jarDir,
            heapMb,
            dataDir,
            logFile: join(dataDir, 'broker.log'),
            propsFile,
            ports: nodePorts,
            readyTimeoutMs,
            fetched,
            sasl: undefined,
            nodeId,
          });
        }),
      );
      const starts = await Promise.allSettled(brokers.map((b) => b.start()));
      const failed = starts.find((s): s is PromiseRejectedResult => s.status === 'rejected');
      if (failed) throw failed.reason;
      const made = new Cluster(brokers, root, removeExitHook);
      cluster = made;
      await made.connect();
      await waitFor(
        `all ${count} nodes in the cluster's metadata`,
        async () => ((await made.admin.describeCluster()).brokers.length === count ? true : undefined),
        { timeoutMs: readyTimeoutMs, intervalMs: 100 },
      );
      made.startMs = Date.now() - started;
      return made;
    } catch (error) {
      lastError = error;
      await cluster?.admin.disconnect().catch(() => undefined);
      const portClash = brokers.some((b) => b && fileContains(b.logFile, 'Address already in use'));
      await Promise.all(brokers.map((b) => b?.kill()));
      removeExitHook();
      rmSync(root, { recursive: true, force: true });
      if (!portClash) throw error;
    }
  }
  throw lastError;
}

class ClusterNode implements KafkaClusterNode {
  constructor(
    readonly nodeId: number,
    private readonly broker: Broker,
  ) {}
  get address(): string {
    return this.broker.brokers[0]!;
  }
  get logFile(): string {
    return this.broker.logFile;
  }
  get running(): boolean {
    return this.broker.running;
  }
  get lastStartMs(): number {
    return this.broker.lastStartMs;
  }
  kill(): Promise<void> {
    return this.broker.kill();
  }
  stop(): Promise<void> {
    return this.broker.halt();
  }
  restart(): Promise<void> {
    return this.broker.restart();
  }
  residentBytes(): number | undefined {
    return residentBytes(this.broker.pid);
  }
}

class Cluster implements KafkaCluster {
  readonly brokers: string[];
  readonly nodes: readonly ClusterNode[];
  startMs = 0;
  readonly admin: Admin;
  private stopped = false;

  constructor(
    private readonly members: Broker[],
    readonly dataDir: string,
    private readonly removeExitHook: () => void,
  ) {
    this.brokers = members.map((b) => b.brokers[0]!);
    this.nodes = members.map((b, i) => new ClusterNode(i + 1, b));
    // Retries spread over ~10 s: a metadata question asked right after a kill reaches a live node.
    const kafka = new Kafka({
      clientId: 'spillway-harness-cluster',
      brokers: this.brokers,
      logLevel: logLevel.NOTHING,
      retry: { retries: 8, initialRetryTime: 100, maxRetryTime: 2000 },
    });
    this.admin = kafka.admin();
  }

  async connect(): Promise<void> {
    await this.admin.connect();
  }

  node(nodeId: number): KafkaClusterNode {
    const node = this.nodes[nodeId - 1];
    if (!node) throw new RangeError(`no node ${nodeId} in a cluster of ${this.nodes.length}`);
    return node;
  }

  /**
   * The partition's metadata, asked again for up to 10 s: right after a topic is made, a node that
   * has not applied it yet answers UNKNOWN_TOPIC_OR_PARTITION.
   */
  private partitionMetadata(topic: string, partition: number) {
    return waitFor(
      `metadata of ${topic}/${partition}`,
      async () => {
        const { topics } = await this.admin.fetchTopicMetadata({ topics: [topic] });
        return topics[0]?.partitions.find((p) => p.partitionId === partition);
      },
      { timeoutMs: 10_000, intervalMs: 100 },
    );
  }

  async createTopic(name: string, partitions = 1): Promise<string> {
    await this.admin.createTopics({
      topics: [{ topic: name, numPartitions: partitions, replicationFactor: this.nodes.length }],
      // kafkajs' own wait gives up on the first node that has not heard of the topic yet
      // (UNKNOWN_TOPIC_OR_PARTITION, seen under load); the wait below retries until all have.
      waitForLeaders: false,
    });
    await this.waitForFullIsr([name]);
    return name;
  }

  async leaderOf(topic: string, partition: number): Promise<KafkaClusterNode> {
    const { leader } = await this.partitionMetadata(topic, partition);
    return this.node(leader);
  }

  async killLeaderOf(topic: string, partition: number): Promise<KafkaClusterNode> {
    const leader = await this.leaderOf(topic, partition);
    await leader.kill();
    return leader;
  }

  waitForNewLeader(
    topic: string,
    partition: number,
    formerLeader: KafkaClusterNode,
  ): Promise<KafkaClusterNode> {
    return waitFor(
      `a new leader of ${topic}/${partition} other than node ${formerLeader.nodeId}`,
      async () => {
        const { leader } = await this.partitionMetadata(topic, partition);
        const node = this.nodes[leader - 1];
        return node && node !== formerLeader && node.running ? node : undefined;
      },
      { timeoutMs: 60_000, intervalMs: 100 },
    );
  }

  waitForFullIsr(topics: readonly string[], timeoutMs = 60_000): Promise<void> {
    return waitFor(
      `every replica of ${topics.join(', ')} in sync`,
      async () => {
        const metadata = await this.admin.fetchTopicMetadata({ topics: [...topics] });
        const whole =
          metadata.topics.length === topics.length &&
          metadata.topics.every(
            (t) =>
              t.partitions.length > 0 &&
              t.partitions.every((p) => p.leader >= 0 && p.isr.length === p.replicas.length),
          );
        if (!whole) return undefined;
        // Each node learns of topics and leaders from the metadata log on its own: one that has
        // not yet (a node just restarted, or a loaded machine) answers a client's metadata
        // request with UNKNOWN_TOPIC_OR_PARTITION. Wait until every running node knows them.
        for (const node of this.nodes.filter((n) => n.running))
          if (!(await knowsTopics(node.address, topics))) return undefined;
        return true;
      },
      { timeoutMs, intervalMs: 200 },
    ).then(() => undefined);
  }

  async stop(): Promise<void> {
    if (this.stopped) return;
    this.stopped = true;
    await this.admin.disconnect().catch(() => undefined);
    await Promise.all(this.members.map((b) => b.kill()));
    this.removeExitHook();
    rmSync(this.dataDir, { recursive: true, force: true });
  }
}
