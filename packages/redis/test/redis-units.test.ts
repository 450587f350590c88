import { StoreError } from '@spillway/core';
import { describe, expect, it } from 'vitest';
import { redisAdapter } from '../src/adapter.js';
import { classifyRedisError, isUnknownOutcome, redisErrorPrefix } from '../src/classify.js';
import {
  commandMapping,
  counter,
  hashFields,
  offsetStreamId,
  streamEntry,
  stringValue,
} from '../src/mappings.js';
import { resolveRedisOptions } from '../src/options.js';
import { crc16, keySlot } from '../src/slot.js';

/** Errors shaped as ioredis raises them (redis-errors' ReplyError / AbortError keep these names). */
function reply(message: string): Error {
  const e = new Error(message);
  e.name = 'ReplyError';
  return e;
}
function named(name: string, message: string): Error {
  const e = new Error(message);
  e.name = name;
  return e;
}

describe('cluster key slots', () => {
  it('computes CRC16 as the cluster specification does', () => {
    // Source: Redis Cluster specification, appendix "CRC16 reference implementation":
    // the output for "123456789" is 0x31C3.
    expect(crc16(Buffer.from('123456789'))).toBe(0x31c3);
  });

  it('hashes only a non-empty hash tag', () => {
    // Source: Redis Cluster specification, "Hash tags" (examples with {user1000}, foo{}{bar}, foo{{bar}}).
    expect(keySlot('{user1000}.following')).toBe(keySlot('{user1000}.followers'));
    expect(keySlot('{user1000}.following')).toBe(keySlot('user1000'));
    expect(keySlot('foo{}{bar}')).toBe(crc16(Buffer.from('foo{}{bar}')) & 16383);
    expect(keySlot('foo{{bar}}zap')).toBe(keySlot('{bar'));
    expect(keySlot('foo{bar}{zap}')).toBe(keySlot('bar'));
  });
});

describe('classifyRedisError', () => {
  it('retries transient server states and lost connections', () => {
    // Source: Redis documentation, "Redis error replies" (LOADING, BUSY, TRYAGAIN, MOVED, ASK).
    for (const m of [
      'LOADING Redis is loading the dataset in memory',
      'BUSY Redis is busy running a script.',
      'TRYAGAIN Multiple keys request during rehashing of slot',
      'MOVED 3999 127.0.0.1:6381',
      'ASK 3999 127.0.0.1:6381',
      "READONLY You can't write against a read only replica.",
      'CLUSTERDOWN The cluster is down',
    ]) {
      expect(classifyRedisError(reply(m)), m).toBe('retry');
    }
    expect(
      classifyRedisError(
        Object.assign(new Error('connect ECONNREFUSED 127.0.0.1:1'), { code: 'ECONNREFUSED' }),
      ),
    ).toBe('retry');
    expect(
      classifyRedisError(
        new Error('All keys in the pipeline should belong to the same slots allocation group'),
      ),
    ).toBe('retry');
    expect(
      classifyRedisError(
        named(
          'MaxRetriesPerRequestError',
          'Reached the max retries per request limit (which is 1). Refer to "maxRetriesPerRequest" option for details.',
        ),
      ),
    ).toBe('retry');
  });

  it('splits data errors of one record', () => {
    expect(
      classifyRedisError(reply('WRONGTYPE Operation against a key holding the wrong kind of value')),
    ).toBe('split');
    expect(classifyRedisError(reply('ERR value is not an integer or out of range'))).toBe('split');
  });

  it('stops on authentication, permissions and unknown commands', () => {
    expect(classifyRedisError(reply('NOAUTH Authentication required.'))).toBe('fatal');
    expect(classifyRedisError(reply("NOPERM User tandem has no permissions to run the 'set' command"))).toBe(
      'fatal',
    );
    expect(classifyRedisError(reply("ERR unknown command 'NOSUCH', with args beginning with: 'k' "))).toBe(
      'fatal',
    );
    const execabort = Object.assign(reply('EXECABORT Transaction discarded because of previous errors.'), {
      previousErrors: [reply("ERR unknown command 'NOSUCH'")],
    });
    expect(classifyRedisError(execabort)).toBe('fatal');
    const oom = Object.assign(reply('EXECABORT Transaction discarded because of previous errors.'), {
      previousErrors: [reply("OOM command not allowed when used memory > 'maxmemory'.")],
    });
    expect(classifyRedisError(oom)).toBe('retry');
    expect(classifyRedisError(new TypeError('bug'))).toBe('fatal');
  });

  it('reads connection aborts and timeouts as unknown outcomes, by default retried', () => {
    const abort = named('AbortError', 'Command aborted due to connection close');
    const timeout = new Error('Command timed out');
    expect(isUnknownOutcome(abort)).toBe(true);
    expect(isUnknownOutcome(timeout)).toBe(true);
    expect(
      isUnknownOutcome(named('MaxRetriesPerRequestError', 'Reached the max retries per request limit')),
    ).toBe(false);
    expect(classifyRedisError(abort)).toBe('retry');
    expect(classifyRedisError(abort, { unknownOutcome: 'split' })).toBe('split');
    const wrapped = new StoreError('x', { cause: timeout, details: { outcome: 'unknown' } });
    expect(classifyRedisError(wrapped, { unknownOutcome: 'split' })).toBe('split');
  });

  it('reads the prefix through Spillway errors', () => {
    expect(
      redisErrorPrefix(new StoreError('x', { cause: reply('WRONGTYPE no'), driverCode: 'WRONGTYPE' })),
    ).toBe('WRONGTYPE');
    expect(redisErrorPrefix(new Error('WRONGTYPE but not a reply'))).toBeUndefined();
  });
});

describe('mappings', () => {
  const r = { id: 'dock-1', free: 3 };
  it('build the documented commands', () => {
    expect(
      stringValue<typeof r>({ key: (x) => x.id, value: (x) => String(x.free), ttlMs: 500 }).commands(
        r,
        undefined,
      ),
    ).toEqual(['SET', 'dock-1', '3', 'PX', 500]);
    expect(
      hashFields<typeof r>({ key: (x) => x.id, fields: (x) => ({ free: x.free }), ttlMs: 9 }).commands(
        r,
        undefined,
      ),
    ).toEqual([
      ['HSET', 'dock-1', 'free', 3],
      ['PEXPIRE', 'dock-1', 9],
    ]);
    expect(
      streamEntry<typeof r>({ key: () => 's', fields: (x) => ({ free: x.free }), maxLen: 10 }).commands(
        r,
        undefined,
      ),
    ).toEqual(['XADD', 's', 'MAXLEN', '~', 10, '*', 'free', 3]);
    expect(
      counter<typeof r>({ key: () => 'c', field: (x) => x.id, by: () => 2 }).commands(r, undefined),
    ).toEqual(['HINCRBY', 'c', 'dock-1', 2]);
  });

  it('declare their idempotence', () => {
    expect(stringValue({ key: () => 'k', value: () => 'v' }).idempotent).toBe(true);
    expect(streamEntry({ key: () => 's', fields: () => ({}) }).idempotent).toBe(false);
    expect(streamEntry({ key: () => 's', fields: () => ({}), id: offsetStreamId }).idempotent).toBe(true);
    expect(counter({ key: () => 'c', by: () => 1 }).idempotent).toBe(false);
    expect(counter({ key: () => 'c', by: () => 1, dedupe: { key: () => 'm', ttlMs: 1000 } }).idempotent).toBe(
      true,
    );
  });

  it('derive stream ids above 0-0 from offsets', () => {
    expect(offsetStreamId(undefined, { offset: '0' })).toBe('0-1');
    expect(offsetStreamId(undefined, { offset: 9_007_199_254_740_993n })).toBe('0-9007199254740994');
    expect(() => offsetStreamId(undefined, {})).toThrow(TypeError);
  });
});

describe('options', () => {
  const client = { pipeline() {}, status: 'ready' } as never;
  const mapping = counter({ key: () => 'c', by: () => 1 });
  it('defaults onUnknownOutcome from the mapping’s idempotence', () => {
    expect(resolveRedisOptions({ client, mapping }).onUnknownOutcome).toBe('dead-letter');
    expect(
      resolveRedisOptions({ client, mapping: stringValue({ key: () => 'k', value: () => 'v' }) })
        .onUnknownOutcome,
    ).toBe('retry');
  });
  it('names the bad option', () => {
    expect(() => resolveRedisOptions({ client, mapping, atomic: 'yes' as never })).toThrow(
      'Expected `atomic` to be a boolean, got `"yes"`',
    );
    expect(() => resolveRedisOptions({ client, mapping, onUnknownOutcome: 'drop' as never })).toThrow(
      /onUnknownOutcome/,
    );
    expect(() => resolveRedisOptions({ client: {} as never, mapping })).toThrow(/client/);
    expect(() => resolveRedisOptions({ client, mapping, batchSize: 3 } as never)).toThrow(/batchSize/);
    expect(() => stringValue({ key: 'k' as never, value: () => 'v' })).toThrow(/`key`/);
  });
});

describe('storeOffsets', () => {
  const client = { pipeline() {}, status: 'ready' } as never;
  const mapping = counter({ key: () => 'c', by: () => 1 });

  it('implies atomic and takes a group and a key', () => {
    const o = resolveRedisOptions({ client, mapping, storeOffsets: { group: 'g', key: 'tandem:offsets' } });
    expect(o.atomic).toBe(true);
    expect(o.storeOffsets).toEqual({ group: 'g', key: 'tandem:offsets' });
  });

  it('names what is missing or cannot go with it', () => {
    expect(() => resolveRedisOptions({ client, mapping, storeOffsets: { group: 'g' } as never })).toThrow(
      /`storeOffsets.key`/,
    );
    expect(() => resolveRedisOptions({ client, mapping, storeOffsets: { key: 'k' } as never })).toThrow(
      /`storeOffsets.group`/,
    );
    expect(() =>
      resolveRedisOptions({ client, mapping, storeOffsets: { group: 'g', key: 'k', table: 't' } as never }),
    ).toThrow(/`storeOffsets.table`/);
    expect(() =>
      resolveRedisOptions({ client, mapping, atomic: false, storeOffsets: { group: 'g', key: 'k' } }),
    ).toThrow(/`atomic`/);
    const deduped = counter({ key: () => 'c', by: () => 1, dedupe: { key: () => 'm', ttlMs: 1000 } });
    expect(() =>
      resolveRedisOptions({ client, mapping: deduped, storeOffsets: { group: 'g', key: 'k' } }),
    ).toThrow(/`mapping`.*dedupe/);
  });

  it('refuses, as fatal, a cluster batch whose keys are not all in the offsets hash’s slot', async () => {
    // A stand-in for an ioredis Cluster: the refusal comes before anything is sent.
    let sent = 0;
    const cluster = {
      isCluster: true,
      status: 'ready',
      pipeline() {},
      async eval() {
        sent++;
        return ['done'];
      },
    } as never;
    const adapter = redisAdapter<{ dock: string }>({
      client: cluster,
      mapping: hashFields({ key: (r) => `tandem:{docks}:${r.dock}`, fields: () => ({ free: 1 }) }),
      storeOffsets: { group: 'g', key: 'tandem:{docks}:offsets' },
    });
    const metas = [0, 1].map((offset) => ({ topic: 't', partition: 0, offset: String(offset) }));
    // Keys under the hash tag of the offsets hash: one slot (Redis Cluster specification, "Hash tags").
    await adapter.write({
      id: 1,
      reason: 'size',
      attempt: 1,
      records: [{ dock: 'a' }, { dock: 'b' }],
      metas,
      bytes: 2,
    });
    expect(sent).toBe(1);

    const spread = redisAdapter<{ dock: string }>({
      client: cluster,
      mapping: hashFields({ key: (r) => `tandem:dock:${r.dock}`, fields: () => ({ free: 1 }) }),
      storeOffsets: { group: 'g', key: 'tandem:{docks}:offsets' },
    });
    const error = await spread
      .write({ id: 2, reason: 'size', attempt: 1, records: [{ dock: 'a' }, { dock: 'b' }], metas, bytes: 2 })
      .catch((e: unknown) => e);
    expect(error).toBeInstanceOf(StoreError);
    expect((error as StoreError).message).toMatch(/cannot be atomic.*\{hash tag\}/);
    expect(spread.classify(error)).toBe('fatal');
    expect(sent).toBe(1);
  });

  it('stops the sink on a mapping that sends a script of its own', async () => {
    const adapter = redisAdapter<number>({
      client: { pipeline() {}, status: 'ready', eval: async () => ['done'] } as never,
      mapping: commandMapping({ idempotent: true, commands: () => ['EVALSHA', 'abc', 0] }),
      storeOffsets: { group: 'g', key: 'k' },
    });
    const error = await adapter
      .write({ id: 1, reason: 'size', attempt: 1, records: [1], metas: [undefined], bytes: 1 })
      .catch((e: unknown) => e);
    expect((error as StoreError).message).toMatch(/EVALSHA.*cannot run inside the script/);
    expect(adapter.classify(error)).toBe('fatal');
  });

  it('retries an unknown outcome of a script whose records all carry offsets, whatever onUnknownOutcome says', () => {
    const adapter = redisAdapter<number>({
      client,
      mapping,
      storeOffsets: { group: 'g', key: 'k' },
      onUnknownOutcome: 'dead-letter',
    });
    const abort = named('AbortError', 'Command aborted due to connection close');
    const guarded = new StoreError('Redis outcome unknown for EVAL', {
      cause: abort,
      details: { command: 'EVAL', outcome: 'unknown', step: 'offsets', guarded: true },
    });
    const unguarded = new StoreError('Redis outcome unknown for EVAL', {
      cause: abort,
      details: { command: 'EVAL', outcome: 'unknown', step: 'offsets', guarded: false },
    });
    expect(adapter.classify(guarded)).toBe('retry');
    expect(adapter.classify(unguarded)).toBe('split');
  });
});
