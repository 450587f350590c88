// Unit tests of the producer adapter's chunking with a stand-in producer (the real broker
// behaviour is covered in test/integration/kafka-producer.test.ts).
import kafkajs from 'kafkajs';
import { describe, expect, it } from 'vitest';
import { KafkaProducerAdapter } from '../src/producer.js';

const { KafkaJSProtocolError, KafkaJSNumberOfRetriesExceeded, KafkaJSConnectionError } = kafkajs;

function fakeKafka(failOnCall: number, error: unknown) {
  const calls: number[] = [];
  const producer = {
    async connect() {},
    async disconnect() {},
    async sendBatch(b: { topicMessages: Array<{ messages: unknown[] }> }) {
      calls.push(b.topicMessages.reduce((n, t) => n + t.messages.length, 0));
      if (calls.length === failOnCall) throw error;
      return [];
    },
  };
  return { kafka: { producer: () => producer } as never, calls };
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
