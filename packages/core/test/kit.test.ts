import { describe, expect, it } from 'vitest';
import { Sink } from '../src/index.js';
import {
  choiceOption,
  countOption,
  InvalidOptionError,
  isSocketError,
  knownOptions,
  partitionKey,
  positiveOption,
  resolveBuckets,
  TypedEmitter,
} from '../src/kit.js';
import { FakeAdapter } from '../src/testing.js';

describe('the option toolkit', () => {
  it('throws one error type for every bad option: a TypeError with SPILLWAY_INVALID_OPTION', () => {
    let caught: unknown;
    try {
      countOption('maxRowsPerStatement', 0, 10);
    } catch (e) {
      caught = e;
    }
    expect(caught).toBeInstanceOf(InvalidOptionError);
    expect(caught).toBeInstanceOf(TypeError);
    expect(caught).toMatchObject({
      code: 'SPILLWAY_INVALID_OPTION',
      option: 'maxRowsPerStatement',
      message: 'Expected `maxRowsPerStatement` to be an integer >= 1, got `0`',
    });
  });

  it('refuses an unknown key, naming it with its parent, and ignores keys set to undefined', () => {
    expect(() => knownOptions({ registry: 1, latencyBucket: [1] }, ['registry'])).toThrow(/`latencyBucket`/);
    expect(() => knownOptions({ maxAttempt: 3 }, ['maxAttempts'], 'retry')).toThrow(/`retry\.maxAttempt`/);
    expect(knownOptions({ registry: 1, other: undefined }, ['registry'])).toEqual({
      registry: 1,
      other: undefined,
    });
    expect(knownOptions(undefined, ['registry'])).toEqual({});
    expect(() => knownOptions(null, ['registry'])).toThrow(/`options` to be an object/);
  });

  it('checks numbers and choices with the same wording everywhere', () => {
    expect(() => positiveOption('idleMs', 0, 1)).toThrow(
      'Expected `idleMs` to be a finite number > 0, got `0`',
    );
    expect(countOption('maxAttempts', Number.POSITIVE_INFINITY, 1, { allowInfinity: true })).toBe(
      Number.POSITIVE_INFINITY,
    );
    expect(() => countOption('n', Number.POSITIVE_INFINITY, 1)).toThrow(/an integer >= 1, got `Infinity`/);
    expect(() => choiceOption('mode', 'merge', ['insert', 'copy', 'upsert'], 'insert')).toThrow(
      'Expected `mode` to be one of "insert", "copy", "upsert", got `"merge"`',
    );
  });

  it('the engine refuses a misspelt retry option', () => {
    expect(() => new Sink(new FakeAdapter<number>(), { retry: { maxAttempt: 3 } as never })).toThrow(
      /`retry\.maxAttempt`/,
    );
  });

  it('fills in and checks the exporters’ bucket options', () => {
    expect(resolveBuckets({ latencyBuckets: [0.1, 1] }).latency).toEqual([0.1, 1]);
    expect(resolveBuckets({}).batchRecords[0]).toBe(1);
    expect(() => resolveBuckets({ durationBuckets: [1, 0.5] })).toThrow(/`durationBuckets`/);
  });
});

describe('the shared helpers', () => {
  it('names a partition one way: topic:partition, or the partition alone', () => {
    expect(partitionKey('dock-status', 3)).toBe('dock-status:3');
    expect(partitionKey(undefined, 3)).toBe('3');
    expect(partitionKey('dock-status', undefined)).toBe('dock-status:');
  });

  // Codes from the Node.js documentation, "Common system errors", and getaddrinfo(3).
  it('reads a lost or refused connection from its code', () => {
    expect(isSocketError(Object.assign(new Error('x'), { code: 'ECONNRESET' }))).toBe(true);
    expect(isSocketError('EAI_AGAIN')).toBe(true);
    expect(isSocketError(Object.assign(new Error('x'), { code: '23505' }))).toBe(false);
    expect(isSocketError(undefined)).toBe(false);
  });

  it('the typed emitter drops an error event nobody listens to, and delivers it to a listener', () => {
    const events = new TypedEmitter<{ error: { cause: string } }>();
    expect(() => events.emit('error', { cause: 'x' })).not.toThrow();
    const seen: string[] = [];
    events.on('error', (p) => seen.push(p.cause));
    events.emit('error', { cause: 'y' });
    expect(seen).toEqual(['y']);
  });
});
