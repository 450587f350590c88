/**
 * Reading a stored offset with OffsetFetch's `require_stable` (KIP-447). kafkajs 2.2.4 sends
 * OffsetFetch versions 1–4 only: those return the offset as last made visible, even while a
 * completed transaction's offset commit is still waiting to be applied, which after a fence can be
 * the offset before the former owner's last transaction. Version 7 with `require_stable` answers
 * UNSTABLE_OFFSET_COMMIT instead until it is applied (Apache Kafka protocol guide, OffsetFetch).
 *
 * kafkajs has no public way to send a request it does not know, so this goes through the client's
 * own cluster (its brokers, TLS and SASL settings) by the private factory every kafkajs client
 * uses; when that is not there (another kafkajs version), `open()` returns undefined and the
 * caller reads the way kafkajs does.
 */
import { StoreError } from '@spillway/core';
import type { Kafka } from 'kafkajs';

const OFFSET_FETCH = 9;
const VERSION = 7;
/** Kafka protocol error codes (Apache Kafka protocol guide, error codes). */
const UNSTABLE_OFFSET_COMMIT = 88;

interface PrivateBroker {
  connectionPool: { send(request: unknown): Promise<unknown> };
}

interface PrivateCluster {
  connect(): Promise<void>;
  disconnect(): Promise<void>;
  findGroupCoordinator(args: { groupId: string }): Promise<PrivateBroker>;
}

/** What the broker said: the next offset (undefined: none stored), or not yet stable. */
export type StableReading = { offset: bigint | undefined } | 'unstable';

/** Protocol error codes a read can meet, by the names kafkajs gives them (Apache Kafka protocol guide). */
const ERROR_NAMES: Record<number, string> = {
  14: 'COORDINATOR_LOAD_IN_PROGRESS',
  15: 'COORDINATOR_NOT_AVAILABLE',
  16: 'NOT_COORDINATOR_FOR_GROUP',
  30: 'GROUP_AUTHORIZATION_FAILED',
  35: 'UNSUPPORTED_VERSION',
};

function offsetFetchError(code: number): StoreError {
  return new StoreError(`OffsetFetch with require_stable failed with Kafka error code ${code}`, {
    driverCode: ERROR_NAMES[code],
    details: { code },
  });
}

function uvarint(n: number): Buffer {
  const bytes: number[] = [];
  let v = n >>> 0;
  while (v >= 0x80) {
    bytes.push((v & 0x7f) | 0x80);
    v >>>= 7;
  }
  bytes.push(v);
  return Buffer.from(bytes);
}

function compactString(s: string): Buffer {
  const b = Buffer.from(s, 'utf8');
  return Buffer.concat([uvarint(b.length + 1), b]);
}

function int32(n: number): Buffer {
  const b = Buffer.alloc(4);
  b.writeInt32BE(n);
  return b;
}

/** The body of an OffsetFetch v7 request for one partition, led by the request header's tag buffer. */
function encode(groupId: string, topic: string, partition: number): Buffer {
  return Buffer.concat([
    // Request header v2 is v1 (which kafkajs writes) plus an empty tag buffer.
    uvarint(0),
    compactString(groupId),
    uvarint(2), // one topic
    compactString(topic),
    uvarint(2), // one partition
    int32(partition),
    uvarint(0), // topic tag buffer
    Buffer.from([1]), // require_stable
    uvarint(0), // request tag buffer
  ]);
}

class Reader {
  private at = 0;
  constructor(private readonly b: Buffer) {}
  uvarint(): number {
    let n = 0;
    for (let shift = 0; ; shift += 7) {
      const byte = this.b[this.at++]!;
      n |= (byte & 0x7f) << shift;
      if (byte < 0x80) return n >>> 0;
    }
  }
  int16(): number {
    const v = this.b.readInt16BE(this.at);
    this.at += 2;
    return v;
  }
  int32(): number {
    const v = this.b.readInt32BE(this.at);
    this.at += 4;
    return v;
  }
  int64(): bigint {
    const v = this.b.readBigInt64BE(this.at);
    this.at += 8;
    return v;
  }
  skip(n: number): void {
    this.at += n;
  }
  compactBytes(): void {
    const n = this.uvarint();
    if (n > 0) this.skip(n - 1);
  }
  tags(): void {
    const count = this.uvarint();
    for (let i = 0; i < count; i++) {
      this.uvarint();
      this.skip(this.uvarint());
    }
  }
}

/** Decodes a v7 response (after the correlation id) for the one partition asked for. */
function decode(payload: Buffer): StableReading {
  const r = new Reader(payload);
  r.tags(); // response header v1
  r.int32(); // throttle_time_ms
  let reading: StableReading = { offset: undefined };
  let partitionError = 0;
  const topics = r.uvarint() - 1;
  for (let t = 0; t < topics; t++) {
    r.compactBytes(); // name
    const partitions = r.uvarint() - 1;
    for (let p = 0; p < partitions; p++) {
      r.int32(); // partition_index
      const offset = r.int64();
      r.int32(); // committed_leader_epoch
      r.compactBytes(); // metadata
      const error = r.int16();
      r.tags();
      if (error === UNSTABLE_OFFSET_COMMIT) reading = 'unstable';
      else if (error !== 0) partitionError = error;
      else reading = { offset: offset < 0n ? undefined : offset };
    }
    r.tags();
  }
  const error = r.int16();
  if (error !== 0) throw offsetFetchError(error);
  if (partitionError !== 0) throw offsetFetchError(partitionError);
  return reading;
}

export class StableOffsetReader {
  private readonly cluster: PrivateCluster;
  private connected: Promise<void> | undefined;

  private constructor(cluster: PrivateCluster) {
    this.cluster = cluster;
  }

  /** A reader on `kafka`'s own cluster settings, or undefined when this kafkajs has no such factory. */
  static open(kafka: Kafka): StableOffsetReader | undefined {
    const key = Object.getOwnPropertySymbols(kafka).find(
      (s) => s.description === 'private:Kafka:createCluster',
    );
    const create = key === undefined ? undefined : (kafka as unknown as Record<symbol, unknown>)[key];
    if (typeof create !== 'function') return undefined;
    const cluster = create({ allowAutoTopicCreation: false }) as PrivateCluster;
    if (typeof cluster?.findGroupCoordinator !== 'function') return undefined;
    return new StableOffsetReader(cluster);
  }

  /** The stored next offset of `topic`/`partition` in `groupId`, or 'unstable' while one is pending. */
  async read(groupId: string, topic: string, partition: number): Promise<StableReading> {
    this.connected ??= this.cluster.connect().catch((error: unknown) => {
      this.connected = undefined;
      throw error;
    });
    await this.connected;
    const broker = await this.cluster.findGroupCoordinator({ groupId });
    const body = encode(groupId, topic, partition);
    return (await broker.connectionPool.send({
      request: {
        apiKey: OFFSET_FETCH,
        apiVersion: VERSION,
        apiName: 'OffsetFetch',
        // kafkajs writes what encode() returns after its own v1 header; it reads `buf` and `buffer`.
        encode: async () => ({ buf: body, buffer: body }),
      },
      response: {
        decode: async (payload: Buffer) => payload,
        parse: async (payload: Buffer) => decode(payload),
      },
    })) as StableReading;
  }

  async close(): Promise<void> {
    if (this.connected === undefined) return;
    this.connected = undefined;
    await this.cluster.disconnect().catch(() => undefined);
  }
}
