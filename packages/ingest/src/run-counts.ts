import type { Sink, SinkEvents } from '@spillway/core';

/** What one ingest run counts as the sink settles its rows. */
export interface RunCounts {
  written: number;
  deadLettered: number;
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
 * settles them, until `release()`.
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
      for (const m of e.metas) {
        if (m === undefined || typeof m.partition !== 'string') continue;
        const run = runs.get(m.partition);
        if (run === undefined || m.topic !== run.source) continue;
        if (durable) run.counts.written++;
        else run.counts.deadLettered++;
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
