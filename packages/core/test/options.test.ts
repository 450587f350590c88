import { describe, expect, it } from 'vitest';
import { installShutdown, Sink } from '../src/index.js';
import { FakeAdapter } from './fakes.js';

const make = (options: Record<string, unknown>) => () => new Sink(new FakeAdapter<number>(), options);

describe('option validation', () => {
  it('names the option, the expectation and the value given', () => {
    expect(make({ maxRecords: 0 })).toThrow(TypeError);
    expect(make({ maxRecords: 0 })).toThrow(/^Expected `maxRecords` to be an integer >= 1, got `0`$/);
    expect(make({ maxAgeMs: -5 })).toThrow(/^Expected `maxAgeMs` to be a finite number > 0, got `-5`$/);
    expect(make({ maxAgeMs: Number.NaN })).toThrow(
      /^Expected `maxAgeMs` to be a finite number > 0, got `NaN`$/,
    );
    expect(make({ idleMs: '100' })).toThrow(/Expected `idleMs` to be a finite number >= 0, got `"100"`/);
    expect(make({ concurrency: 1.5 })).toThrow(/`concurrency` to be an integer/);
    expect(make({ retry: { maxAttempts: 0 } })).toThrow(/`retry.maxAttempts`/);
    expect(make({ recordOverheadBytes: -1 })).toThrow(
      /^Expected `recordOverheadBytes` to be a finite number >= 0, got `-1`$/,
    );
  });

  it('refuses pending bounds smaller than one batch', () => {
    expect(make({ maxRecords: 100, maxPendingRecords: 50 })).toThrow(
      /`maxPendingRecords` to be an integer >= maxRecords \(100\)/,
    );
    expect(make({ maxBytes: 1000, maxPendingBytes: 999 })).toThrow(/`maxPendingBytes`/);
  });

  it('makes the default pending byte bound room for concurrency + 2 full batches, overhead included', () => {
    const sink = new Sink(new FakeAdapter<number>(), { maxBytes: 1000, maxRecords: 10, concurrency: 2 });
    expect(sink.options.recordOverheadBytes).toBe(256);
    expect(sink.options.maxPendingBytes).toBe((1000 + 10 * 256) * 4);
    const plain = new Sink(new FakeAdapter<number>(), { maxBytes: 1000, recordOverheadBytes: 0 });
    expect(plain.options.maxPendingBytes).toBe(3000);
  });

  it('refuses unknown options, so a typo is not silently ignored', () => {
    expect(make({ maxAge: 100 })).toThrow(/`maxAge`/);
  });

  it('refuses a dead-letter target without write()', () => {
    expect(make({ deadLetter: {} })).toThrow(/`deadLetter`/);
  });

  it('carries a stable code', () => {
    try {
      make({ maxRecords: -1 })();
    } catch (e) {
      expect((e as { code: string }).code).toBe('SPILLWAY_INVALID_OPTION');
    }
    expect.assertions(1);
  });

  it('refuses unknown signal names for the shutdown coordinator', () => {
    expect(() => installShutdown({ signals: ['SIGTERMINATE'], exit: false })).toThrow(
      /`signals`.*"SIGTERMINATE"/,
    );
    expect(() => installShutdown({ signals: ['SIGKILL'], exit: false })).toThrow(/cannot be caught/);
  });
});
