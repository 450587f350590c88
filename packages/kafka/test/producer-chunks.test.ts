// Unit tests of the producer adapter's chunking with a stand-in producer (the real broker
// behaviour is covered in test/integration/kafka-producer.test.ts).
import kafkajs, { Partitioners } from 'kafkajs';
import { describe, expect, it } from 'vitest';
import { KafkaProducerAdapter } from '../src/producer.js';

const { KafkaJSProtocolError, KafkaJSNumberOfRetriesExceeded, KafkaJSConnectionError } = kafkajs;

const PARTITIONS = [0, 1, 2].map((partitionId) => ({
  partitionErrorCode: 0,
  partitionId,
  leader: partitionId + 1,
  replicas: [1, 2, 3],
  isr: [1, 2, 3],
}));

type Partition = (args: { topic: string; partitionMetadata: typeof PARTITIONS; message: unknown }) => number;

/**
 * A stand-in producer that places messages with the configured partitioner, as kafkajs does, and
 * answers for every partition it placed a message on except those in `unanswered`.
 */
function fakeKafka(failOnCall: number, error: unknown, unanswered: readonly number[] = []) {
  const calls: number[] = [];
  const kafka = {
    producer(config: { createPartitioner: () => Partition }) {
      const partition = config.createPartitioner();
      return {
        async connect() {},
        async disconnect() {},
        async sendBatch(b: { topicMessages: Array<{ topic: string; messages: unknown[] }> }) {
          calls.push(b.topicMessages.reduce((n, t) => n + t.messages.length, 0));
          if (calls.length === failOnCall) throw error;
          const answered = new Map<string, { topicName: string; partition: number }>();
          for (const { topic, messages } of b.topicMessages)
            for (const message of messages) {
              const p = partition({ topic, partitionMetadata: PARTITIONS, message });
              if (!unanswered.includes(p)) answered.set(`${topic}/${p}`, { topicName: topic, partition: p });
            }
          return [...answered.values()];
        },
      };
    },
  };
  return { kafka: kafka as never, calls };
}

const batch = (n: number) => ({
  id: 1,
  reason: 'size' as const,
  attempt: 1,
  records: Array.from({ length: n }, (_, i) => i),
  metas: Array.from({ length: n }, () => undefined),
  bytes: 0,
});

describe('producer adapter chunking', () => {
  it('sends a batch within maxRequestBytes as one sendBatch', async () => {
    const { kafka, calls } = fakeKafka(0, undefined);
    const a = new KafkaProducerAdapter<number>({
      kafka,
      topic: 't',
      mapper: () => ({ value: 'x'.repeat(76) }),
    });
    expect(await a.write(batch(1000))).toBeUndefined();
    expect(calls).toEqual([1000]);
  });

  it('splits a larger batch into consecutive calls of at most maxRequestBytes', async () => {
    const { kafka, calls } = fakeKafka(0, undefined);
    // 76 + 24 overhead = 100 estimated bytes per record; 1,000 per 100,000-byte request.
    const a = new KafkaProducerAdapter<number>({
      kafka,
      topic: 't',
      maxRequestBytes: 100_000,
      mapper: () => ({ value: 'x'.repeat(76) }),
    });
    expect(await a.write(batch(2500))).toBeUndefined();
    expect(calls).toEqual([1000, 1000, 500]);
  });

  it('reports only the records of the failed and later calls when a later call fails', async () => {
    const retriable = new KafkaJSNumberOfRetriesExceeded(new KafkaJSConnectionError('Connection error'), {
      retryCount: 5,
      retryTime: 1,
    });
    const { kafka } = fakeKafka(2, retriable);
    const a = new KafkaProducerAdapter<number>({
      kafka,
      topic: 't',
      maxRequestBytes: 100_000,
      mapper: () => ({ value: 'x'.repeat(76) }),
    });
    const out = await a.write(batch(2500));
    expect(out?.rejected.map((r) => r.index)).toEqual(Array.from({ length: 1500 }, (_, i) => 1000 + i));
    expect(a.classify(out!.rejected[0]!.error)).toBe('retry');
  });

  it('turns a refusal of a later call into a resend, so the next attempt can bisect it', async () => {
    const tooLarge = new KafkaJSProtocolError({
      type: 'MESSAGE_TOO_LARGE',
      code: 10,
      retriable: false,
      message: 'too large',
    } as never);
    const { kafka } = fakeKafka(2, tooLarge);
    const a = new KafkaProducerAdapter<number>({
      kafka,
      topic: 't',
      maxRequestBytes: 100_000,
      mapper: () => ({ value: 'x'.repeat(76) }),
    });
    const out = await a.write(batch(2500));
    expect(out?.rejected).toHaveLength(1500);
    expect(a.classify(out!.rejected[0]!.error)).toBe('retry');
    // The idempotent producer was dropped; the next write makes a new one.
    await a.write(batch(1));
    expect(a.producersCreated).toBe(2);
  });

  it('throws when the first call fails, so the engine retries or bisects the whole batch', async () => {
    const tooLarge = new KafkaJSProtocolError({
      type: 'MESSAGE_TOO_LARGE',
      code: 10,
      retriable: false,
      message: 'too large',
    } as never);
    const { kafka } = fakeKafka(1, tooLarge);
    const a = new KafkaProducerAdapter<number>({ kafka, topic: 't', mapper: () => ({ value: 'v' }) });
    const error = await a.write(batch(10)).catch((e: unknown) => e);
    expect(error).toMatchObject({ code: 'SPILLWAY_STORE_ERROR', driverCode: 'MESSAGE_TOO_LARGE' });
    expect(a.classify(error)).toBe('split');
  });

  it('rejects a record over maxRecordBytes without sending it, and a mapper failure as that record’s', async () => {
    const { kafka, calls } = fakeKafka(0, undefined);
    const a = new KafkaProducerAdapter<number>({
      kafka,
      topic: 't',
      maxRecordBytes: 10,
      mapper: (n) => {
        if (n === 3) throw new RangeError('bad record');
        return { value: n === 1 ? 'x'.repeat(11) : 'ok' };
      },
    });
    const out = await a.write(batch(5));
    expect(calls).toEqual([3]);
    expect(out?.rejected.map((r) => r.index)).toEqual([1, 3]);
    expect(out!.rejected.map((r) => a.classify(r.error))).toEqual(['split', 'split']);
    expect(out!.rejected[0]!.error).toMatchObject({ driverCode: 'MESSAGE_TOO_LARGE' });
  });
});

describe('producer adapter acknowledgement check', () => {
  it('reports the records of a partition missing from the produce response as not written and retryable, and only those', async () => {
    const { kafka } = fakeKafka(0, undefined, [1]);
    const a = new KafkaProducerAdapter<number>({
      kafka,
      topic: 't',
      mapper: (n) => ({ key: `dock-${n}`, value: String(n) }),
    });
    const out = await a.write(batch(60));
    // Where kafkajs' own default partitioner puts each key (murmur2, as the Java client).
    const place = Partitioners.DefaultPartitioner();
    const onPartition1 = Array.from({ length: 60 }, (_, n) => n).filter(
      (n) =>
        place({
          topic: 't',
          partitionMetadata: PARTITIONS,
          message: { key: `dock-${n}`, value: String(n) },
        }) === 1,
    );
    expect(onPartition1.length).toBeGreaterThan(0);
    expect(onPartition1.length).toBeLessThan(60);
    expect(out?.rejected.map((r) => r.index)).toEqual(onPartition1);
    const error = out!.rejected[0]!.error;
    expect(error).toMatchObject({
      code: 'SPILLWAY_STORE_ERROR',
      details: { stage: 'unacknowledged', topic: 't', partition: 1, records: onPartition1.length },
    });
    expect(a.classify(error)).toBe('retry');
  });

  it('reports records sent to an explicit partition the topic does not have as UNKNOWN_TOPIC_OR_PARTITION', async () => {
    const { kafka } = fakeKafka(0, undefined, [7]);
    const a = new KafkaProducerAdapter<number>({
      kafka,
      topic: 't',
      mapper: (n) => ({ value: String(n), partition: n % 2 === 0 ? 0 : 7 }),
    });
    const out = await a.write(batch(6));
    expect(out?.rejected.map((r) => r.index)).toEqual([1, 3, 5]);
    expect(out!.rejected[0]!.error).toMatchObject({
      driverCode: 'UNKNOWN_TOPIC_OR_PARTITION',
      details: { topic: 't', partition: 7, records: 3 },
    });
  });

  it('keeps an unkeyed record on its first partition when kafkajs places it again on a retry within one send', async () => {
    let answered: Array<{ topicName: string; partition: number }> = [];
    const kafka = {
      producer(config: { createPartitioner: () => Partition }) {
        const partition = config.createPartitioner();
        return {
          async connect() {},
          async disconnect() {},
          async sendBatch(b: { topicMessages: Array<{ topic: string; messages: unknown[] }> }) {
            const { topic, messages } = b.topicMessages[0]!;
            const place = () =>
              messages.map((message) => partition({ topic, partitionMetadata: PARTITIONS, message }));
            const first = place();
            // kafkajs groups the messages again on each of its retries (producer/sendMessages.js).
            const again = place();
            expect(again).toEqual(first);
            answered = [...new Set(first)].map((p) => ({ topicName: topic, partition: p }));
            return answered;
          },
        };
      },
    };
    const a = new KafkaProducerAdapter<number>({
      kafka: kafka as never,
      topic: 't',
      mapper: (n) => ({ value: String(n) }),
    });
    expect(await a.write(batch(10))).toBeUndefined();
    expect(answered.length).toBeGreaterThan(0);
  });
});
