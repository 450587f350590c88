import type { RejectReason } from './reject.js';

/** A rejected row as the summary shows it: where and why, never the row's contents. */
export interface RejectNote {
  readonly line: number;
  readonly column: string | undefined;
  readonly reason: RejectReason;
  readonly message: string;
}

/** What an ingest did. Returned by `ingest()`, printed by the CLI, written with `--summary`. */
export interface IngestSummary {
  /** The name rows carry as `meta.topic` (a file's base name unless `sourceName` is given). */
  source: string;
  format: 'csv' | 'ndjson';
  /** Data rows found (header and skipped blank lines not counted). */
  rowsRead: number;
  /** Rows the store acknowledged: durable. */
  rowsWritten: number;
  /** Rows that failed parsing or validation; they are in the reject target. */
  rowsRejected: number;
  /** Valid rows the store refused (constraint, type): the sink's dead-letter target has them. */
  rowsDeadLettered: number;
  /** Rows handed to the sink and not yet terminal (0 unless the ingest stopped on a sink failure). */
  rowsPending: number;
  blankLines: number;
  bytesRead: number;
  durationMs: number;
  /** rowsRead per second of `durationMs`. */
  rowsPerSecond: number;
  /** True when every row handed to the sink is terminal: written rows are durable, none waits. */
  durable: boolean;
  /** The last physical line read. */
  lastLine: number;
  rejectsByReason: Partial<Record<RejectReason, number>>;
  /** The first rejects (at most 20), without row contents. */
  firstRejects: RejectNote[];
  /** Set when the ingest stopped before the end of its input. */
  stopped: string | undefined;
}

export const FIRST_REJECTS = 20;
