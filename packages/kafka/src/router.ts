/**
 * Decoding and routing one message: the record it becomes and the sinks it goes to. A message
 * that cannot be decoded or routed becomes a dead letter for the bridge's decode sink.
 */
import { messageOf } from '@spillway/core';
import type { KafkaMessage } from 'kafkajs';
import type { KafkaBridgeOptions } from './bridge-options.js';
import type { BridgeCounts } from './bridge-types.js';
import { DecodeError, type DecodeFailure, type KafkaSource, undecodable } from './decode.js';
import type { AnySink } from './partition.js';

export const NO_SINKS: AnySink[] = [];

export class Router<R> {
  private readonly decode: KafkaBridgeOptions<R>['decode'];
  private readonly route: KafkaBridgeOptions<R>['route'];
  /** Where undecodable messages go: the bridge's decode dead-letter sink. */
  private readonly decodeSinks: AnySink[];
  /** Called for every sink a route names, before anything is handed to it. */
  private readonly watch: (sink: AnySink) => void;
  private readonly counts: BridgeCounts;
  // The last single sink the router returned, and the list made for it: a router that returns the
  // same sink every time costs no array per message. (Arrays are not cached: a router may change
  // the contents of an array it returns again.)
  private lastRoute: unknown;
  private lastSinks: AnySink[] = NO_SINKS;

  constructor(
    options: Pick<KafkaBridgeOptions<R>, 'decode' | 'route'>,
    decodeSink: AnySink,
    watch: (sink: AnySink) => void,
    counts: BridgeCounts,
  ) {
    this.decode = options.decode;
    this.route = options.route;
    this.decodeSinks = [decodeSink];
    this.watch = watch;
    this.counts = counts;
  }

  /**
   * Decodes and routes one message: pushes its record (or its dead letter) onto `records` and
   * returns the sinks it goes to (empty: routed nowhere). The returned array is never mutated.
   */
  routeInto(m: KafkaMessage, source: KafkaSource, records: unknown[]): AnySink[] {
    let failure: DecodeError;
    let record: R | DecodeError;
    try {
      record = this.decode(m, source);
    } catch (error) {
      record =
        error instanceof DecodeError
          ? error
          : new DecodeError(`decoder threw: ${messageOf(error)}`, { cause: error });
    }
    if (!(record instanceof DecodeError)) {
      try {
        const sinks = this.sinksOf(this.route(record, source));
        records.push(record);
        return sinks;
      } catch (error) {
        failure = new DecodeError(`route() threw: ${messageOf(error)}`, { cause: error });
      }
    } else failure = record;
    this.counts.undecodable++;
    const letter: DecodeFailure = { message: undecodable(m, source), error: failure };
    records.push(letter);
    return this.decodeSinks;
  }

  private sinksOf(route: unknown): AnySink[] {
    if (route == null) return NO_SINKS;
    if (route === this.lastRoute) return this.lastSinks;
    if (!Array.isArray(route)) {
      this.watch(route as AnySink);
      this.lastRoute = route;
      this.lastSinks = [route as AnySink];
      return this.lastSinks;
    }
    const list = route as AnySink[];
    for (const sink of list) this.watch(sink);
    // The bridge never mutates a route list, so the router's own array can be used as is.
    return hasDuplicates(list) ? [...new Set(list)] : list;
  }
}

function hasDuplicates(list: readonly AnySink[]): boolean {
  for (let i = 1; i < list.length; i++) for (let j = 0; j < i; j++) if (list[i] === list[j]) return true;
  return false;
}
