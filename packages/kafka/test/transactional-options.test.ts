import { describe, expect, it } from 'vitest';
import { reserveIds, transactionalIdOf } from '../src/transactional-ids.js';
import { resolveKafkaTransactionalOptions } from '../src/transactional-options.js';

const kafka = { producer() {}, admin() {} } as never;
const mapper = () => ({ value: 'v' });

describe('transactional sink options', () => {
  it('default to the prefix "spillway", an offsets group of their own and short first retries', () => {
    const o = resolveKafkaTransactionalOptions({ kafka, mapper, group: 'dock-enricher', topic: 'out' });
    expect(o.transactionalIdPrefix).toBe('spillway');
    expect(o.offsetsGroup).toBe('spillway-dock-enricher');
    expect(o.transactionTimeoutMs).toBe(60_000);
    expect(o.maxRecordBytes).toBe(1_048_576);
    expect(o.producer).toMatchObject({
      allowAutoTopicCreation: false,
      retry: { retries: 5, initialRetryTime: 25 },
    });
  });

  it("keep the user's retry settings over the defaults", () => {
    const o = resolveKafkaTransactionalOptions({
      kafka,
      mapper,
      group: 'g',
      producer: { retry: { retries: 9 } },
    });
    expect(o.producer.retry).toEqual({ retries: 9, initialRetryTime: 25 });
  });

  it('name the bad option', () => {
    expect(() => resolveKafkaTransactionalOptions({ kafka, mapper } as never)).toThrow(/`group`/);
    expect(() => resolveKafkaTransactionalOptions({ kafka, mapper, group: '' })).toThrow(/`group`/);
    expect(() =>
      resolveKafkaTransactionalOptions({ kafka: { producer() {} } as never, mapper, group: 'g' }),
    ).toThrow(/`kafka`/);
    expect(() => resolveKafkaTransactionalOptions({ kafka, mapper: 1 as never, group: 'g' })).toThrow(
      /`mapper`/,
    );
    expect(() =>
      resolveKafkaTransactionalOptions({ kafka, mapper, group: 'g', transactionTimeoutMs: 0 }),
    ).toThrow(/`transactionTimeoutMs`/);
    expect(() =>
      resolveKafkaTransactionalOptions({ kafka, mapper, group: 'g', lingerMs: 5 } as never),
    ).toThrow(/`lingerMs`/);
  });

  it("refuse to store offsets under the bridge's own group, whose commits would overwrite them", () => {
    expect(() => resolveKafkaTransactionalOptions({ kafka, mapper, group: 'g', offsetsGroup: 'g' })).toThrow(
      /`offsetsGroup` to be a group other than the bridge's own \("g"\)/,
    );
  });

  it('refuse producer settings the sink owns instead of silently replacing them', () => {
    expect(() =>
      resolveKafkaTransactionalOptions({
        kafka,
        mapper,
        group: 'g',
        producer: { transactionalId: 'x' } as never,
      }),
    ).toThrow(/`producer.transactionalId` to be absent/);
  });
});

describe('transactional ids', () => {
  it('name one id per source partition: <prefix>-<group>-<topic>-<partition>', () => {
    expect(transactionalIdOf('tandem', 'dock-enricher', 'tandem.dock-status', 7)).toBe(
      'tandem-dock-enricher-tandem.dock-status-7',
    );
  });

  it('refuse a second open sink with the same prefix and group in one process, until the first releases it', () => {
    const release = reserveIds('p', 'unit-group');
    expect(() => reserveIds('p', 'unit-group')).toThrow(/`transactionalIdPrefix`/);
    const other = reserveIds('q', 'unit-group');
    release();
    const again = reserveIds('p', 'unit-group');
    again();
    other();
  });
});
