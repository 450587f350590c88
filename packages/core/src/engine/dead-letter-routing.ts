/**
 * Dead-letter routing: records the store refused, or that ran out of retries, go to the sink's
 * dead-letter target. Without a target, or when the target fails, the sink fails: nothing is
 * dropped without a place to put it.
 */
import type { Clock } from '../clock.js';
import { messageOf, SpillwayError } from '../errors.js';
import type { TypedEmitter } from '../typed-emitter.js';
import type { DeadLetter, DeadLetterReason, DeadLetterTarget, SinkEvents } from '../types.js';
import { type InFlight, type Outcome, type Part, partLength, positions } from './records.js';

export interface DeadLetterHooks<T> {
  settle(batch: InFlight<T>, part: Part, outcome: Outcome): void;
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

  /**
   * Hands the records of `batch` that `part` names to the target and settles them; false when
   * that failed (the sink is then failed).
   */
  async route(batch: InFlight<T>, part: Part, reason: DeadLetterReason, error: unknown): Promise<boolean> {
    const target = this.target;
    if (!target) {
      this.hooks.fail(
        new SpillwayError(
          'SPILLWAY_NO_DEAD_LETTER_TARGET',
          `Sink "${this.name}" has ${partLength(batch, part)} record(s) to dead-letter (${reason}: ${messageOf(error)}) but no \`deadLetter\` target`,
          { cause: error },
        ),
      );
      return false;
    }
    const time = this.clock.wallNow();
    const letters: DeadLetter<T>[] = positions(batch, part).map((i) => ({
      sink: this.name,
      record: batch.records[i] as T,
      meta: batch.metas?.[i],
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
    this.hooks.settle(batch, part, 'dead-lettered');
    this.events.emit('dead-letter', {
      sink: this.name,
      batchId: batch.id,
      count: partLength(batch, part),
      reason,
      error,
    });
    return true;
  }
}
