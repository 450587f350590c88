import { describe, expect, it } from 'vitest';
import { resolveKafkaProducerOptions } from '../src/producer-options.js';

const kafka = { producer() {} } as never;
const mapper = () => ({ value: 'v' });

describe('producer options', () => {
  it('default to an idempotent producer with acks -1, a 1 MiB record check and no auto-creation', () => {
    const o = resolveKafkaProducerOptions({ kafka, mapper, topic: 't' });
    expect(o.acks).toBe(-1);
    expect(o.idempotent).toBe(true);
    expect(o.maxRecordBytes).toBe(1_048_576);
    expect(o.producer).toMatchObject({
      idempotent: true,
      allowAutoTopicCreation: false,
      retry: { retries: 5 },
    });
    expect(o.producer.maxInFlightRequests).toBeUndefined();
  });

  it('keep one request in flight per broker when idempotence is off, so retries cannot reorder', () => {
    expect(
      resolveKafkaProducerOptions({ kafka, mapper, idempotent: false, acks: 1 }).producer.maxInFlightRequests,
    ).toBe(1);
  });

  it('name the bad option', () => {
    expect(() => resolveKafkaProducerOptions({ kafka, mapper, acks: 1 })).toThrow(
      /`acks` to be -1 with `idempotent: true`/,
    );
    expect(() => resolveKafkaProducerOptions({ kafka, mapper, acks: 2 as never, idempotent: false })).toThrow(
      /`acks`/,
    );
    expect(() => resolveKafkaProducerOptions({ kafka, mapper: 'x' as never })).toThrow(/`mapper`/);
    expect(() => resolveKafkaProducerOptions({ kafka: {} as never, mapper })).toThrow(/`kafka`/);
    expect(() => resolveKafkaProducerOptions({ kafka, mapper, maxRecordBytes: 0 })).toThrow(
      /`maxRecordBytes`/,
    );
    expect(() => resolveKafkaProducerOptions({ kafka, mapper, lingerMs: 5 } as never)).toThrow(/`lingerMs`/);
  });
});
