/**
 * Decoding Kafka messages into records, and the dead letter of a message that cannot be decoded.
 */
import {
  type DeadLetterTarget,
  type SinkAdapter,
  SpillwayError,
  type SpillwayErrorOptions,
} from '@spillway/core';
import type { IHeaders, KafkaMessage } from 'kafkajs';

/** Where a message came from, as the decoder and the router see it. */
export interface KafkaSource {
  readonly topic: string;
  readonly partition: number;
}

/**
 * Returned (or thrown) by a decoder for a message it cannot turn into a record. The bridge
 * dead-letters the message with its coordinates and raw bytes and moves on: the partition never
 * stalls on it.
 */
export class DecodeError extends SpillwayError {
  constructor(message: string, options: SpillwayErrorOptions = {}) {
    super('SPILLWAY_DECODE_ERROR', message, options);
  }
}

/**
 * The dead-letter record of an undecodable message: its bytes copied out of the fetch buffer
 * (a file dead letter writes Buffers as `{ "base64": … }`), with its coordinates.
 */
export interface UndecodableMessage {
  readonly topic: string;
  readonly partition: number;
  readonly offset: string;
  /** The message's timestamp, ms since the epoch, as Kafka gave it. */
  readonly timestamp: string;
  readonly key: Buffer | null;
  readonly value: Buffer | null;
  readonly headers: Readonly<Record<string, Buffer | string | null>>;
}

/** Copies a message's bytes: kafkajs hands out slices of the whole fetch response. */
export function undecodable(message: KafkaMessage, source: KafkaSource): UndecodableMessage {
  return {
    topic: source.topic,
    partition: source.partition,
    offset: message.offset,
    timestamp: message.timestamp,
    key: copyBytes(message.key),
    value: copyBytes(message.value),
    headers: copyHeaders(message.headers),
  };
}

function copyBytes(b: Buffer | null | undefined): Buffer | null {
  return b == null ? null : Buffer.from(b);
}

function copyHeaders(headers: IHeaders | undefined): Record<string, Buffer | string | null> {
  const out: Record<string, Buffer | string | null> = {};
  if (!headers) return out;
  for (const [name, value] of Object.entries(headers)) {
    if (value === undefined) continue;
    // A header repeated on the wire arrives as an array; keep the last, as most clients do.
    const one = Array.isArray(value) ? value[value.length - 1] : value;
    out[name] = one === undefined ? null : typeof one === 'string' ? one : Buffer.from(one);
  }
  return out;
}

/** What the bridge buffers for one undecodable message. */
export interface DecodeFailure {
  readonly message: UndecodableMessage;
  readonly error: DecodeError;
}

/**
 * A sink adapter that hands decode failures to the user's dead-letter target, so that they go
 * through the same engine as every other record: batched, bounded (the partition pauses when the
 * target is slow) and settled only once the target has stored them.
 */
export function decodeDeadLetterAdapter(
  target: DeadLetterTarget<UndecodableMessage>,
  bridgeName: string,
  wallNow: () => number,
): SinkAdapter<DecodeFailure> {
  return {
    kind: 'kafka-decode-dead-letter',
    async write(batch) {
      const time = wallNow();
      await target.write(
        batch.records.map((r, i) => ({
          sink: bridgeName,
          record: r.message,
          meta: batch.metas[i],
          reason: 'decode' as const,
          error: r.error,
          time,
        })),
      );
    },
    // A target that fails is retried with backoff; if it keeps failing the decode sink has no
    // dead letter of its own and stops (fatal), and the bridge never commits past those messages.
    classify: () => 'retry',
    estimateBytes: (r) => (r.message.key?.length ?? 0) + (r.message.value?.length ?? 0) + 128,
    async close() {
      await target.close?.();
    },
  };
}
