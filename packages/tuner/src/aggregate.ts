import type { CellResult } from './cell-result.js';
import type { CellSpec } from './cell-spec.js';
import { round } from './numbers.js';

/** A cell's repeated runs and their median and spread. */
export interface CellAggregate {
  id: string;
  spec: CellSpec;
  runs: CellResult[];
  errors: string[];
  /** Medians over the runs. */
  median: Figures;
  /** Smallest and largest value over the runs, for the figures that matter most. */
  spread: { throughput: [number, number]; p99: [number, number]; p99WithStuck: [number, number] };
}

export interface Figures {
  realisedRate: number;
  throughput: number;
  p50: number;
  p90: number;
  p99: number;
  max: number;
  scheduledP99: number;
  p99WithStuck: number;
  stuckRecords: number;
  stuckOldestAgeMs: number;
  batches: number;
  meanBatchRecords: number;
  flushP99: number;
  peakBufferedRecords: number;
  peakBufferedBytes: number;
  peakRssMb: number;
  cpuSeconds: number;
  littleRatio: number | null;
}

export function median(values: number[]): number {
  if (values.length === 0) return 0;
  const s = [...values].sort((a, b) => a - b);
  const mid = s.length >> 1;
  return s.length % 2 === 1 ? s[mid]! : (s[mid - 1]! + s[mid]!) / 2;
}

function figuresOf(r: CellResult): Figures {
  return {
    realisedRate: r.realisedRate,
    throughput: r.throughput,
    p50: r.latencyMs.p50,
    p90: r.latencyMs.p90,
    p99: r.latencyMs.p99,
    max: r.latencyMs.max,
    scheduledP99: r.scheduledLatencyMs.p99,
    p99WithStuck: r.latencyWithStuckMs.p99,
    stuckRecords: r.stuck.records,
    stuckOldestAgeMs: r.stuck.oldestAgeMs,
    batches: r.batches,
    meanBatchRecords: r.meanBatchRecords,
    flushP99: r.flushDurationMs.p99,
    peakBufferedRecords: r.peakBufferedRecords,
    peakBufferedBytes: r.peakBufferedBytes,
    peakRssMb: r.peakRssMb,
    cpuSeconds: r.cpuSeconds,
    littleRatio: r.little.ratio,
  };
}

/** Median of each figure over the runs; a null Little ratio stays null when every run has none. */
export function aggregate(spec: CellSpec, runs: CellResult[], errors: string[]): CellAggregate {
  const figs = runs.map(figuresOf);
  const keys = Object.keys(figs[0] ?? figuresOf(emptyResult(spec))) as (keyof Figures)[];
  const med = {} as Record<keyof Figures, number | null>;
  for (const k of keys) {
    const vals = figs.map((f) => f[k]).filter((v): v is number => typeof v === 'number');
    med[k] = vals.length === 0 ? (k === 'littleRatio' ? null : 0) : round(median(vals));
  }
  const range = (k: keyof Figures): [number, number] => {
    const vals = figs.map((f) => f[k]).filter((v): v is number => typeof v === 'number');
    return vals.length === 0 ? [0, 0] : [Math.min(...vals), Math.max(...vals)];
  };
  return {
    id: spec.id,
    spec,
    runs,
    errors,
    median: med as unknown as Figures,
    spread: { throughput: range('throughput'), p99: range('p99'), p99WithStuck: range('p99WithStuck') },
  };
}

function emptyResult(spec: CellSpec): CellResult {
  const d = { count: 0, min: 0, mean: 0, p50: 0, p90: 0, p99: 0, max: 0 };
  return {
    id: spec.id,
    spec,
    scheduled: 0,
    offered: 0,
    realisedRate: 0,
    durable: 0,
    throughput: 0,
    latencyMs: d,
    scheduledLatencyMs: d,
    latencyWithStuckMs: { p99: 0, max: 0 },
    stuck: { records: 0, oldestAgeMs: 0, meanAgeMs: 0 },
    batches: 0,
    meanBatchRecords: 0,
    flushes: { size: 0, bytes: 0, age: 0, idle: 0, manual: 0, shutdown: 0, revoke: 0 },
    flushDurationMs: d,
    peakBufferedRecords: 0,
    peakBufferedBytes: 0,
    peakRssMb: 0,
    cpuSeconds: 0,
    little: { meanHeld: 0, throughput: 0, meanTimeHeldMs: 0, ratio: null },
    windowMs: 0,
  };
}
