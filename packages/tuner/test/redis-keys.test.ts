import { describe, expect, it } from 'vitest';
import { checkMapping, fillKey, parseKeyTemplate, redisArg, writtenFields } from '../src/redis-keys.js';
import { templateLiteral } from '../src/snippet-code.js';

describe('the Redis key template', () => {
  it('fills {field} placeholders from the record, text and numbers as they are', () => {
    const t = parseKeyTemplate('tandem:{district}:dock:{dock_id}');
    expect(t.fields).toEqual(['district', 'dock_id']);
    expect(fillKey(t, { district: 'north', dock_id: 17 })).toBe('tandem:north:dock:17');
    expect(fillKey(parseKeyTemplate('tandem:events'), { dock_id: 1 })).toBe('tandem:events');
    expect(fillKey(t, { district: null, dock_id: { a: 1 } })).toBe('tandem::dock:{"a":1}');
  });

  it('refuses a stray brace or an empty placeholder, naming the key option', () => {
    for (const bad of ['tandem:{dock_id', 'tandem:dock_id}', 'tandem:{}', 'a:{b{c}}', ''])
      expect(() => parseKeyTemplate(bad), bad).toThrow(/`key`/);
  });

  it('prints the template as a TypeScript template literal that makes the same keys', () => {
    const d = '$';
    const records = [
      { dock_id: 17, 'station id': 'north-3', x: 'y' },
      { dock_id: null, 'station id': 'a`b', x: 4 },
    ];
    for (const text of ['tandem:dock:{dock_id}', `a\`b${d}{x}:{station id}\\${d}`, 'plain']) {
      const t = parseKeyTemplate(text);
      const literal = templateLiteral(t);
      const compiled = new Function('r', `return ${literal};`) as (r: Record<string, unknown>) => string;
      for (const r of records) expect(compiled(r), literal).toBe(fillKey(t, r));
    }
  });
});

describe('the Redis mapping a tune writes with', () => {
  it('takes every sample field not in the key as the hash fields unless they are named', () => {
    const key = parseKeyTemplate('tandem:dock:{dock_id}');
    expect(writtenFields({ kind: 'hash' }, key, ['dock_id', 'bikes', 'free'])).toEqual(['bikes', 'free']);
    expect(writtenFields({ kind: 'hash', fields: ['free'] }, key, ['dock_id', 'bikes', 'free'])).toEqual([
      'free',
    ]);
  });

  it('refuses options that do not belong to the mapping, naming the option', () => {
    expect(() => checkMapping({ kind: 'hash', member: 'dock_id' })).toThrow(/`member`/);
    expect(() => checkMapping({ kind: 'sorted-set', member: 'dock_id' })).toThrow(/`score`/);
    expect(() => checkMapping({ kind: 'stream', ttlMs: 1000 })).toThrow(/`ttlMs`/);
    expect(() => checkMapping({ kind: 'string', ttlMs: 1.5 })).toThrow(/`ttlMs`/);
    expect(() => checkMapping({ kind: 'list' as never })).toThrow(/`mapping`/);
    expect(() => checkMapping({ kind: 'counter', by: 'rentals' })).not.toThrow();
  });

  it('sends null as an empty string and objects as JSON', () => {
    expect(redisArg(null)).toBe('');
    expect(redisArg(3)).toBe(3);
    expect(redisArg(true)).toBe('true');
    expect(redisArg({ a: [1] })).toBe('{"a":[1]}');
  });
});
