import type { Distribution, FlushReason, RecordMeta, Sink } from '@spillway/core';
import type { DockStatus } from './records.js';

/**
 * What a cell drives: the Spillway sink, or a baseline written the way people first write one.
 * Both report the same events so that one measurement path serves every cell.
 */
export interface Subject {
  /** Accepts at once or returns false when the caller must `write()` and wait. */
  tryWrite(record: DockStatus, meta: RecordMeta): boolean;
  write(record: DockStatus, meta: RecordMeta): Promise<void>;
  onFlush(listener: (reason: FlushReason, records: number, bytes: number) => void): void;
  onWritten(listener: (records: number, durationMs: number) => void): void;
  onSettled(
    listener: (
      metas: readonly (RecordMeta | undefined)[],
      latenciesMs: readonly number[],
      durable: boolean,
    ) => void,
  ): void;
  /** Flushes what is left and closes: called after the measured window ends. */
  close(): Promise<void>;
  flushDurationMs(): Distribution | undefined;
}

/** The Spillway sink as a subject. */
export function sinkSubject(sink: Sink<DockStatus>): Subject {
  return {
    tryWrite: (record, meta) => sink.tryWrite(record, meta),
    write: (record, meta) => sink.write(record, meta),
    onFlush: (listener) => void sink.on('flush', (e) => listener(e.reason, e.records, e.bytes)),
    onWritten: (listener) => void sink.on('written', (e) => listener(e.records, e.durationMs)),
    onSettled: (listener) =>
      void sink.on('settled', (e) => listener(e.metas, e.latenciesMs, e.outcome === 'durable')),
    close: () => sink.close({ timeoutMs: 60_000 }),
    flushDurationMs: () => sink.snapshot().flushDurationMs,
  };
}
