// An adapter whose close() does nothing, so that the sinks of successive trials can share one
// connected producer; the tune closes the real adapter itself at the end.
import type { SinkAdapter } from '@spillway/core';

export function keepOpen<T>(adapter: SinkAdapter<T>): SinkAdapter<T> {
  return {
    kind: adapter.kind,
    write: (batch) => adapter.write(batch),
    classify: (error) => adapter.classify(error),
    ...(adapter.estimateBytes ? { estimateBytes: adapter.estimateBytes.bind(adapter) } : {}),
    ...(adapter.prepare ? { prepare: adapter.prepare.bind(adapter) } : {}),
  };
}
