import { SpillwayError } from '@spillway/core';
import type { IngestSummary } from './summary.js';

/**
 * Why an ingest stopped before the end of its input.
 * - `too-large`: the input passed `maxInputBytes` (an HTTP server answers 413).
 * - `reject-limit`: more rows were rejected than `maxRejects` allows.
 * - `header`: the CSV header is malformed, has duplicate names, or lacks a required column.
 * - `read`: reading the input failed (file error, client went away, aborted).
 * - `sink`: the sink failed (a fatal store error); rows not reported durable are not.
 * - `rejects`: the reject file could not be written.
 */
export type IngestStopReason = 'too-large' | 'reject-limit' | 'header' | 'read' | 'sink' | 'rejects';

/**
 * An ingest that stopped early. `summary` counts what happened up to the stop; rows counted in
 * `summary.rowsWritten` are durable. Code `SPILLWAY_SINK_FAILED` for `sink`, `SPILLWAY_INPUT_ERROR`
 * for every other reason.
 */
export class IngestError extends SpillwayError {
  readonly reason: IngestStopReason;
  readonly summary: IngestSummary;

  constructor(reason: IngestStopReason, message: string, summary: IngestSummary, cause?: unknown) {
    super(reason === 'sink' ? 'SPILLWAY_SINK_FAILED' : 'SPILLWAY_INPUT_ERROR', message, {
      cause,
      details: { reason, line: summary.lastLine },
    });
    this.reason = reason;
    this.summary = summary;
  }
}
