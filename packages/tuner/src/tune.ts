import { runCellProcess } from './cell-process.js';
import type { CellResult } from './cell-result.js';
import { type CellSpec, cellId, graceFor, type Settings } from './cell-spec.js';
import type { RunProgress } from './runner.js';
import { type ShapeName, shapeParams } from './shapes.js';
import { type StoreSpec, storeLabel } from './store-spec.js';

export interface TuneOptions {
  store: StoreSpec;
  /** The p99 accept → durable target, ms. */
  p99Ms: number;
  shapes: ShapeName[];
  /** Records/s of the steady, skewed and gap shapes. @default 5000 */
  rate?: number;
  /** Length of each trial, ms. @default 1500 (trickle: 3000) */
  durationMs?: number;
  maxRecords?: number[];
  onProgress?: (p: RunProgress) => void;
}

/** One setting tried, with its result on each shape. */
export interface TuneCandidate {
  settings: Settings;
  results: Partial<Record<ShapeName, CellResult>>;
  /** Throughput on the first shape asked for: the ranking figure. */
  throughput: number;
  /** Worst p99 over the shapes (stuck records counted at their age). */
  worstP99: number;
  meets: boolean;
}

export interface TuneOutcome {
  store: string;
  p99Ms: number;
  shapes: ShapeName[];
  rate: number;
  best: TuneCandidate | undefined;
  runnerUp: TuneCandidate | undefined;
  candidates: TuneCandidate[];
  /** Smallest p99 of one store write seen in any trial: the floor under every setting's p99. */
  storeWriteP99Ms: number;
  failures: string[];
}

/** The maxAgeMs values worth trying for a p99 target: a tenth, a quarter and a half of it. */
export function ageCandidates(p99Ms: number): number[] {
  return [...new Set([p99Ms / 10, p99Ms / 4, p99Ms / 2].map((v) => Math.max(1, Math.round(v))))];
}

/** The settings the tuner tries: one write per record, and maxRecords × maxAgeMs around the target. */
export function tuneGrid(p99Ms: number, maxRecords = [50, 200, 1000, 5000]): Settings[] {
  const idleMs = 100;
  const out: Settings[] = [
    { maxRecords: 1, maxAgeMs: Math.max(1, Math.round(p99Ms / 2)), idleMs, concurrency: 1 },
  ];
  for (const maxAgeMs of ageCandidates(p99Ms))
    for (const n of maxRecords) out.push({ maxRecords: n, maxAgeMs, idleMs, concurrency: 1 });
  return out;
}

/**
 * Tries every setting of the tuner's grid on each shape (one fresh process per trial) and picks
 * the one with the highest throughput whose p99 meets the target on every shape. Throughputs
 * within 2 % count as equal; then fewer batches (less load on the store) wins, then lower p99.
 */
export async function tune(o: TuneOptions): Promise<TuneOutcome> {
  if (!(Number.isFinite(o.p99Ms) && o.p99Ms > 0))
    throw new TypeError(`Expected \`p99\` to be a finite number of ms > 0, got \`${o.p99Ms}\``);
  if (o.shapes.length === 0) throw new TypeError('Expected `shapes` to name at least one shape');
  const rate = o.rate ?? 5000;
  const grid = tuneGrid(o.p99Ms, o.maxRecords);
  const total = grid.length * o.shapes.length;
  const candidates: TuneCandidate[] = [];
  const failures: string[] = [];
  let done = 0;
  let storeWriteP99Ms = Number.POSITIVE_INFINITY;
  for (const settings of grid) {
    const c: TuneCandidate = { settings, results: {}, throughput: 0, worstP99: 0, meets: true };
    for (const shapeName of o.shapes) {
      const rated = shapeName === 'steady' || shapeName === 'skewed' || shapeName === 'gap';
      const duration = o.durationMs ?? (shapeName === 'trickle' || shapeName === 'gap' ? 3000 : 1500);
      const shape = shapeParams(shapeName, {
        durationMs: duration,
        ...(rated ? { rate } : {}),
        ...(shapeName === 'gap' ? { gapAtMs: duration / 3, gapMs: duration / 3 } : {}),
      });
      const variant = settings.maxRecords === 1 ? 'per-record' : 'spillway';
      const spec: CellSpec = {
        id: `tune_${cellId(o.store, shapeName, variant, settings)}`,
        store: o.store,
        shape,
        variant,
        settings,
        graceMs: graceFor(variant, settings),
      };
      try {
        const r = await runCellProcess(spec);
        c.results[shapeName] = r;
        if (r.flushDurationMs.count > 0) storeWriteP99Ms = Math.min(storeWriteP99Ms, r.flushDurationMs.p99);
        c.worstP99 = Math.max(c.worstP99, r.latencyWithStuckMs.p99);
        if (r.latencyWithStuckMs.p99 > o.p99Ms || r.stuck.records > 0) c.meets = false;
        o.onProgress?.({ done: ++done, total, cell: spec, result: r });
      } catch (e) {
        c.meets = false;
        failures.push((e as Error).message.split('\n')[0] ?? String(e));
        o.onProgress?.({ done: ++done, total, cell: spec, error: (e as Error).message });
      }
    }
    c.throughput = c.results[o.shapes[0]!]?.throughput ?? 0;
    candidates.push(c);
  }
  const ranked = candidates.filter((c) => c.meets).sort(compareCandidates(o.shapes[0]!));
  return {
    store: storeLabel(o.store),
    p99Ms: o.p99Ms,
    shapes: o.shapes,
    rate,
    best: ranked[0],
    runnerUp: ranked[1],
    candidates,
    storeWriteP99Ms: Number.isFinite(storeWriteP99Ms) ? storeWriteP99Ms : 0,
    failures,
  };
}

function compareCandidates(primary: ShapeName): (a: TuneCandidate, b: TuneCandidate) => number {
  return (a, b) => {
    const top = Math.max(a.throughput, b.throughput, 1);
    if (Math.abs(a.throughput - b.throughput) / top > 0.02) return b.throughput - a.throughput;
    const ab = a.results[primary]?.batches ?? 0;
    const bb = b.results[primary]?.batches ?? 0;
    if (ab !== bb) return ab - bb;
    return a.worstP99 - b.worstP99;
  };
}
