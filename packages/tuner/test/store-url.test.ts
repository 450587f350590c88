import { describe, expect, it } from 'vitest';
import { storeFromUrl } from '../src/store-url.js';

describe('storeFromUrl', () => {
  it('reads each store kind from its URL scheme', () => {
    expect(storeFromUrl('postgres://u@h:5432/db', 'copy')).toEqual({
      kind: 'postgres',
      url: 'postgres://u@h:5432/db',
      mode: 'copy',
    });
    expect(storeFromUrl('postgresql://h/db')).toMatchObject({ kind: 'postgres', mode: 'insert' });
    expect(storeFromUrl('rediss://h:6380')).toEqual({ kind: 'redis', url: 'rediss://h:6380' });
    expect(storeFromUrl('kafka://a:9092,b:9092')).toEqual({ kind: 'kafka', brokers: ['a:9092', 'b:9092'] });
    expect(storeFromUrl('noop:')).toEqual({ kind: 'noop' });
    expect(storeFromUrl('sim:5')).toEqual({ kind: 'sim', latencyMs: 5, perRecordUs: 1 });
  });

  it('names the URL it cannot read', () => {
    expect(() => storeFromUrl('mysql://h/db')).toThrow(/got `mysql:\/\/h\/db`/);
    expect(() => storeFromUrl('kafka://')).toThrow(TypeError);
    expect(() => storeFromUrl('sim:fast')).toThrow(/sim:<latency ms>/);
  });
});
