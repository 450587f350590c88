import { aggregate, type CellAggregate } from './aggregate.js';
import { runCellProcess } from './cell-process.js';
import type { CellResult } from './cell-result.js';
import type { CellSpec } from './cell-spec.js';

/** What a run of many cells reports after each one. */
export interface RunProgress {
  done: number;
  total: number;
  cell: CellSpec;
  result?: CellResult;
  error?: string;
}

/** Runs every cell `repeats` times, one process at a time (parallel cells would share the cores). */
export async function runCells(
  cells: CellSpec[],
  repeats: number,
  onProgress?: (p: RunProgress) => void,
): Promise<CellAggregate[]> {
  const out: CellAggregate[] = [];
  const total = cells.length * repeats;
  let done = 0;
  for (const cell of cells) {
    const runs: CellResult[] = [];
    const errors: string[] = [];
    for (let i = 0; i < repeats; i++) {
      try {
        const result = await runCellProcess(cell);
        runs.push(result);
        onProgress?.({ done: ++done, total, cell, result });
      } catch (e) {
        const message = (e as Error).message;
        errors.push(message);
        onProgress?.({ done: ++done, total, cell, error: message });
      }
    }
    out.push(aggregate(cell, runs, errors));
  }
  return out;
}
