/**
 * Dead-letter routing: records the store refused, or that ran out of retries, go to the sink's
 * dead-letter target. Without a target, or when the target fails, the sink fails: nothing is
 * dropped without a place to put it.
 */
import type { Clock } from '../clock.js';
import { messageOf, SpillwayError } from '../errors.js';
import type { TypedEmitter } from '../typed-emitter.js';
import type { DeadLetter, DeadLetterReason, DeadLetterTarget, SinkEvents } from '../types.js';
import type { Entry, InFlight, Outcome } from './records.js';

export interface DeadLetterHooks<T> {
  settle(batch: InFlight<T>, entries: Entry<T>[], outcome: Outcome): void;
  fail(error: unknown): void;
}

export class DeadLetterRouter<T> {
  constructor(
    private readonly name: string,
    private readonly target: DeadLetterTarget<T> | undefined,
    private readonly clock: Clock,
    private readonly events: TypedEmitter<SinkEvents>,
    private readonly hooks: DeadLetterHooks<T>,
  ) {}

  /** Hands records to the target and settles them; false when that failed (the sink is then failed). */
  async route(
    batch: InFlight<T>,
    entries: Entry<T>[],
    reason: DeadLetterReason,
    error: unknown,
  ): Promise<boolean> {
    const target = this.target;
    if (!target) {
      this.hooks.fail(
        new SpillwayError(
          'SPILLWAY_NO_DEAD_LETTER_TARGET',
          `Sink "${this.name}" has ${entries.length} record(s) to dead-letter (${reason}: ${messageOf(error)}) but no \`deadLetter\` target`,
          { cause: error },
        ),
      );
      return false;
    }
    const time = this.clock.wallNow();
    const letters: DeadLetter<T>[] = entries.map((e) => ({
      sink: this.name,
      record: e.record,
      meta: e.meta,
      reason,
      error,
      time,
    }));
    try {
      await target.write(letters);
    } catch (e) {
      this.hooks.fail(
        new SpillwayError(
          'SPILLWAY_DEAD_LETTER_FAILED',
          `Dead-letter target of sink "${this.name}" failed: ${messageOf(e)}`,
          {
            cause: e,
          },
        ),
      );
      return false;
    }
    this.hooks.settle(batch, entries, 'dead-lettered');
    this.events.emit('dead-letter', {
      sink: this.name,
      batchId: batch.id,
      count: entries.length,
      reason,
      error,
    });
    return true;
  }
}
