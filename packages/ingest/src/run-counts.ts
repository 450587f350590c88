import type { RecordMeta, Sink, SinkEvents } from '@spillway/core';

/** What one ingest run counts as the sink settles its rows. */
export interface RunCounts {
  written: number;
  deadLettered: number;
}

/**
 * The metadata of an ingest record: a record may stand for several rows (a `CsvRun`), and a run
 * handed back to be written row by row (`isolated`) is counted by its rows instead.
 */
export interface IngestMeta extends RecordMeta {
  readonly rows?: number;
  isolated?: boolean;
}

interface Dispatch {
  /** Run id → its source name and counts. */
  readonly runs: Map<string, { source: string; counts: RunCounts }>;
  readonly listener: (e: SinkEvents['settled']) => void;
}

// One 'settled' listener per sink, whatever the number of runs writing into it: a listener per
// run would grow the sink's listener list with every concurrent upload (and Node warns past 10).
const dispatchers = new WeakMap<Sink<never>, Dispatch>();

/**
 * Counts the rows of run `runId` (their `meta.partition`, with `meta.topic === source`) as `sink`
 * settles them, until `release()`: `meta.rows` rows per record (1 when unset), none for a record
 * whose rows were handed back (`meta.isolated`).
 */
export function trackRun<T>(
  sink: Sink<T>,
  runId: string,
  source: string,
): { counts: RunCounts; release(): void } {
  const key = sink as unknown as Sink<never>;
  let d = dispatchers.get(key);
  if (!d) {
    const runs: Dispatch['runs'] = new Map();
    const listener = (e: SinkEvents['settled']) => {
      const durable = e.outcome === 'durable';
      for (const meta of e.metas) {
        const m = meta as IngestMeta | undefined;
        if (m === undefined || typeof m.partition !== 'string' || m.isolated) continue;
        const run = runs.get(m.partition);
        if (run === undefined || m.topic !== run.source) continue;
        const rows = m.rows ?? 1;
        if (durable) run.counts.written += rows;
        else run.counts.deadLettered += rows;
      }
    };
    d = { runs, listener };
    dispatchers.set(key, d);
    sink.on('settled', listener);
  }
  const counts: RunCounts = { written: 0, deadLettered: 0 };
  d.runs.set(runId, { source, counts });
  const dispatch = d;
  return {
    counts,
    release() {
      dispatch.runs.delete(runId);
      if (dispatch.runs.size === 0) {
        sink.off('settled', dispatch.listener);
        dispatchers.delete(key);
      }
    },
  };
}
