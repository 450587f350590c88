import { Sink, type SinkAdapter } from '@spillway/core';
import { estimateJsonBytes } from '@spillway/core/kit';
import type { CellResult } from './cell-result.js';
import type { CellSpec } from './cell-spec.js';
import { drive } from './drive.js';
import { SeededRandom } from './random.js';
import { type DockStatus, dockStatus } from './records.js';
import { SizeOnlyBatcher } from './size-only.js';
import { openStore } from './stores.js';
import { type Subject, sinkSubject } from './subject.js';

/** Runs one cell in this process and returns its measurements. */
export async function runCell(spec: CellSpec): Promise<CellResult> {
  if (spec.store.kind === 'bridge') {
    const { runBridgeCell } = await import('./bridge-cell.js');
    return runBridgeCell(spec);
  }
  const store = await openStore(spec.store, spec.id);
  try {
    const estimate = store.adapter.estimateBytes?.bind(store.adapter) ?? estimateJsonBytes;
    // One write before the window opens, so connection setup is not charged to the first batch.
    const warm = dockStatus(new SeededRandom(7), -1, 0, Date.now());
    await store.adapter.write({
      id: 0,
      reason: 'manual',
      attempt: 1,
      records: [warm],
      metas: [undefined],
      bytes: estimate(warm),
    });
    const subject = makeSubject(spec, store.adapter, estimate);
    const result = await drive(spec, subject, estimate);
    if (store.version !== undefined) result.storeVersion = store.version;
    return result;
  } finally {
    await store.dispose();
  }
}

function makeSubject(
  spec: CellSpec,
  adapter: SinkAdapter<DockStatus>,
  estimate: (r: DockStatus) => number,
): Subject {
  const s = spec.settings;
  switch (spec.variant) {
    case 'size-only':
      return new SizeOnlyBatcher(adapter, s.maxRecords, estimate);
    case 'per-record':
      return sinkSubject(
        new Sink(adapter, {
          name: 'bench',
          maxRecords: 1,
          maxAgeMs: s.maxAgeMs,
          idleMs: s.idleMs,
          concurrency: s.concurrency,
          estimateBytes: estimate,
        }),
      );
    case 'spillway':
      return sinkSubject(
        new Sink(adapter, {
          name: 'bench',
          maxRecords: s.maxRecords,
          maxAgeMs: s.maxAgeMs,
          idleMs: s.idleMs,
          concurrency: s.concurrency,
          estimateBytes: estimate,
        }),
      );
  }
}
