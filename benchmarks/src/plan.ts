import type { CellSpec, Settings, Variant } from './cell-run.js';
import { type ShapeName, type ShapeParams, shapeParams } from './shapes.js';
import { type StoreSpec, storeLabel } from './stores.js';

/** One store and the shapes it runs. */
export interface StorePlan {
  store: StoreSpec;
  shapes: ShapeName[];
  /** A grid of this store's own (slow stores get fewer cells). */
  grid?: { maxRecords: number[]; maxAgeMs: number[] };
}

/** The settings grid and what else a run includes. */
export interface Plan {
  stores: StorePlan[];
  maxRecords: number[];
  maxAgeMs: number[];
  idleMs: number[];
  concurrency: number[];
  /** maxRecords of the size-only baseline cells (empty: no size-only baseline). */
  sizeOnly: number[];
  /** Include the one-write-per-record baseline. */
  perRecord: boolean;
  /** Runs per cell, each in a fresh process. */
  repeats: number;
  /**
   * A smaller grid for every shape but steady, whose cells mostly show what each setting does
   * with silence (stuck records, tail latency) rather than trace a throughput curve.
   */
  sideGrid?: { maxRecords: number[]; maxAgeMs: number[] };
  /** Parameters layered over each shape's defaults (rate, durationMs, keys, seed, …). */
  shapeOverrides: Partial<Record<ShapeName, Partial<ShapeParams>>>;
}

/**
 * How long a cell waits after its schedule for the last records: long enough for an age flush and
 * its write to finish (twice maxAgeMs plus a margin), bounded so a stuck baseline cannot stall a run.
 */
export function graceFor(variant: Variant, s: Settings): number {
  if (variant === 'size-only') return 500;
  return Math.min(3000, Math.max(500, 2 * Math.max(s.maxAgeMs, s.idleMs) + 300));
}

/** Every cell of a plan, in run order (store, then shape, then baselines, then the grid). */
export function cellsOf(plan: Plan): CellSpec[] {
  const cells: CellSpec[] = [];
  const defaults = { idleMs: plan.idleMs[0] ?? 100, concurrency: 1 };
  for (const { store, shapes, grid: own } of plan.stores) {
    for (const shapeName of shapes) {
      const shape = shapeParams(shapeName, plan.shapeOverrides[shapeName]);
      const add = (variant: Variant, settings: Settings) => {
        const id = cellId(store, shapeName, variant, settings);
        cells.push({ id, store, shape, variant, settings, graceMs: graceFor(variant, settings) });
      };
      // The bridge feeds a Spillway sink; a size-only batcher has no bridge to sit behind.
      if (store.kind !== 'bridge')
        for (const n of plan.sizeOnly)
          add('size-only', { maxRecords: n, maxAgeMs: 0, idleMs: 0, concurrency: 1 });
      if (plan.perRecord)
        add('per-record', { maxRecords: 1, maxAgeMs: Math.min(...plan.maxAgeMs), ...defaults });
      const grid = own ?? (shapeName !== 'steady' && plan.sideGrid ? plan.sideGrid : plan);
      for (const concurrency of plan.concurrency) {
        for (const idleMs of plan.idleMs) {
          for (const maxAgeMs of grid.maxAgeMs) {
            for (const maxRecords of grid.maxRecords)
              add('spillway', { maxRecords, maxAgeMs, idleMs, concurrency });
          }
        }
      }
    }
  }
  return cells;
}

/** A stable id usable in file, table and key names. */
export function cellId(store: StoreSpec, shape: ShapeName, variant: Variant, s: Settings): string {
  const st = storeLabel(store).replace(/[^a-z0-9]+/gi, '_');
  if (variant === 'size-only') return `${st}_${shape}_sizeonly_n${s.maxRecords}`;
  if (variant === 'per-record') return `${st}_${shape}_perrecord`;
  return `${st}_${shape}_n${s.maxRecords}_a${s.maxAgeMs}_i${s.idleMs}_c${s.concurrency}`;
}
