import type { ShapeName, ShapeParams } from './shapes.js';
import { type StoreSpec, storeLabel } from './store-spec.js';

/** Which batcher a cell drives. */
export type Variant = 'spillway' | 'size-only' | 'per-record';

export interface Settings {
  maxRecords: number;
  maxAgeMs: number;
  idleMs: number;
  concurrency: number;
}

export interface CellSpec {
  id: string;
  store: StoreSpec;
  shape: ShapeParams;
  variant: Variant;
  /** Sink settings; `size-only` reads maxRecords only, `per-record` forces maxRecords 1. */
  settings: Settings;
  /** How long after the schedule ends the cell waits for the last records to land, ms. */
  graceMs: number;
}

/**
 * How long a cell waits after its schedule for the last records: long enough for an age flush and
 * its write to finish (twice maxAgeMs plus a margin), bounded so a stuck baseline cannot stall a run.
 */
export function graceFor(variant: Variant, s: Settings): number {
  if (variant === 'size-only') return 500;
  return Math.min(3000, Math.max(500, 2 * Math.max(s.maxAgeMs, s.idleMs) + 300));
}

/** A stable id usable in file, table and key names. */
export function cellId(store: StoreSpec, shape: ShapeName, variant: Variant, s: Settings): string {
  const st = storeLabel(store).replace(/[^a-z0-9]+/gi, '_');
  if (variant === 'size-only') return `${st}_${shape}_sizeonly_n${s.maxRecords}`;
  if (variant === 'per-record') return `${st}_${shape}_perrecord`;
  return `${st}_${shape}_n${s.maxRecords}_a${s.maxAgeMs}_i${s.idleMs}_c${s.concurrency}`;
}
