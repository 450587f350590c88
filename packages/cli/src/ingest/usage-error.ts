import { SpillwayError } from '@spillway/core';

/** A command line that cannot be run as given (exit code 64, EX_USAGE). */
export class UsageError extends SpillwayError {
  constructor(message: string) {
    super('SPILLWAY_INVALID_OPTION', message);
  }
}
