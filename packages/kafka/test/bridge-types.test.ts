// Type tests of the bridge's public types: what a router may return, and what each event
// listener receives. They are checked by the compiler (a wrong type fails the type check), and
// the runtime assertions below only say that the file ran.
import type { Sink } from '@spillway/core';
import type {
  BridgeEventName,
  BridgeEvents,
  BridgeSnapshot,
  KafkaBridge,
  KafkaBridgeOptions,
  KafkaSource,
  Route,
} from '@spillway/kafka';
import { describe, expectTypeOf, it } from 'vitest';

interface DockStatus {
  dockId: string;
  bikes: number;
}

describe('the bridge router types', () => {
  it('lets a router return one sink, a list of sinks, or nothing', () => {
    expectTypeOf<Sink<DockStatus>>().toMatchTypeOf<Route<DockStatus>>();
    expectTypeOf<Sink<DockStatus>[]>().toMatchTypeOf<Route<DockStatus>>();
    expectTypeOf<readonly Sink<DockStatus>[]>().toMatchTypeOf<Route<DockStatus>>();
    expectTypeOf<undefined>().toMatchTypeOf<Route<DockStatus>>();
    expectTypeOf<null>().toMatchTypeOf<Route<DockStatus>>();
  });

  it('refuses a router that returns something other than sinks', () => {
    expectTypeOf<string>().not.toMatchTypeOf<Route<DockStatus>>();
    expectTypeOf<Array<{ write: () => void }>>().not.toMatchTypeOf<Route<DockStatus>>();
  });

  it('hands the router the decoded record and its source partition', () => {
    type RouteFn = KafkaBridgeOptions<DockStatus>['route'];
    expectTypeOf<RouteFn>().parameters.toEqualTypeOf<[DockStatus, KafkaSource]>();
    expectTypeOf<RouteFn>().returns.toEqualTypeOf<Route<DockStatus>>();
    expectTypeOf<KafkaSource>().toEqualTypeOf<{ readonly topic: string; readonly partition: number }>();
  });
});

describe('the bridge event payloads', () => {
  it('names exactly the five events', () => {
    expectTypeOf<BridgeEventName>().toEqualTypeOf<'commit' | 'assign' | 'pause' | 'resume' | 'error'>();
  });

  it('types each payload by its event name', () => {
    expectTypeOf<BridgeEvents['commit']>().toEqualTypeOf<{
      offsets: ReadonlyArray<{ topic: string; partition: number; offset: string }>;
    }>();
    expectTypeOf<BridgeEvents['assign']>().toEqualTypeOf<{
      assigned: string[];
      revoked: string[];
      kept: string[];
      generation: number;
    }>();
    expectTypeOf<BridgeEvents['pause']>().toEqualTypeOf<{ topic: string; partition: number; sink: string }>();
    expectTypeOf<BridgeEvents['resume']>().toEqualTypeOf<{ topic: string; partition: number }>();
    expectTypeOf<BridgeEvents['error']>().toEqualTypeOf<{ error: unknown; fatal: boolean }>();
  });

  it('gives a listener the payload of the event it listens to', () => {
    // Never called: the compiler checks the listeners' parameter types.
    const listen = (bridge: KafkaBridge<DockStatus>) => {
      bridge.on('commit', (p) => expectTypeOf(p).toEqualTypeOf<BridgeEvents['commit']>());
      bridge.on('pause', (p) => expectTypeOf(p).toEqualTypeOf<BridgeEvents['pause']>());
      bridge.on('error', (p) => expectTypeOf(p.fatal).toEqualTypeOf<boolean>());
      // @ts-expect-error a `commit` listener gets no `sink` (that is the `pause` payload)
      bridge.on('commit', (p) => p.sink);
      // @ts-expect-error no such event
      bridge.on('flush', () => undefined);
    };
    expectTypeOf(listen).toBeFunction();
  });

  it('reports offsets in the snapshot as strings (Kafka offsets are 64-bit)', () => {
    expectTypeOf<BridgeSnapshot['partitions'][number]['committed']>().toEqualTypeOf<string | undefined>();
    expectTypeOf<BridgeSnapshot['partitions'][number]['durable']>().toEqualTypeOf<string | undefined>();
  });
});
