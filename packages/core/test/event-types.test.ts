// Type tests: checked by `tsc -p tsconfig.unit-tests.json` (part of `npm test`); at run time
// expectTypeOf does nothing, so these pin the public types, not behaviour.
import { describe, expectTypeOf, it } from 'vitest';
import {
  type DeadLetterReason,
  type FlushReason,
  type RecordMeta,
  Sink,
  type SinkEventName,
  type SinkEvents,
} from '../src/index.js';
import { FakeAdapter } from '../src/testing.js';

const sink = new Sink(new FakeAdapter<{ dock: string }>());

describe('sink event payloads', () => {
  it('names exactly the events the sink emits', () => {
    expectTypeOf<SinkEventName>().toEqualTypeOf<
      'flush' | 'written' | 'retry' | 'dead-letter' | 'backpressure' | 'settled' | 'error'
    >();
  });

  it('gives each listener the payload of its event', () => {
    sink.on('flush', (p) => {
      expectTypeOf(p).toEqualTypeOf<{
        sink: string;
        batchId: number;
        reason: FlushReason;
        records: number;
        bytes: number;
        slotWaitMs: number;
      }>();
    });
    sink.on('written', (p) => {
      expectTypeOf(p).toEqualTypeOf<{
        sink: string;
        batchId: number;
        records: number;
        bytes: number;
        durationMs: number;
        attempts: number;
      }>();
    });
    sink.on('retry', (p) => {
      expectTypeOf(p).toEqualTypeOf<{
        sink: string;
        batchId: number;
        attempt: number;
        delayMs: number;
        error: unknown;
      }>();
    });
    sink.on('dead-letter', (p) => {
      expectTypeOf(p.reason).toEqualTypeOf<DeadLetterReason>();
      expectTypeOf(p.count).toBeNumber();
      expectTypeOf(p.error).toBeUnknown();
    });
    sink.on('backpressure', (p) => {
      expectTypeOf(p).toEqualTypeOf<{ sink: string; waitedMs: number }>();
    });
    sink.on('settled', (p) => {
      expectTypeOf(p.outcome).toEqualTypeOf<'durable' | 'dead-lettered'>();
      expectTypeOf(p.metas).toEqualTypeOf<readonly (RecordMeta | undefined)[]>();
      expectTypeOf(p.latenciesMs).toEqualTypeOf<readonly number[]>();
    });
    sink.once('error', (p) => {
      expectTypeOf(p).toEqualTypeOf<{ sink: string; error: unknown }>();
    });
  });

  it('refuses a listener written for another event, and an unknown event name', () => {
    // @ts-expect-error a 'flush' payload has no `waitedMs`
    sink.on('flush', (p: SinkEvents['backpressure']) => p.waitedMs);
    // @ts-expect-error there is no 'flushed' event
    sink.on('flushed', () => {});
    expectTypeOf(sink.on('flush', () => {})).toEqualTypeOf<typeof sink>();
  });

  it('keeps write() and the outcome of writeDurable() typed by the record', () => {
    expectTypeOf(sink.write).parameter(0).toEqualTypeOf<{ dock: string }>();
    expectTypeOf(sink.writeDurable({ dock: 'd1' })).resolves.toEqualTypeOf<'durable' | 'dead-lettered'>();
  });
});
