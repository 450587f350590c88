import { spawn } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import type { CellResult, CellSpec } from './cell-run.js';

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

/** Where the cell entry point is: the built `cell.js`, or `cell.ts` through tsx when run from source. */
function cellCommand(): { command: string; args: string[] } {
  const here = import.meta.url;
  if (here.endsWith('.ts')) {
    return {
      command: process.execPath,
      args: ['--import', 'tsx', fileURLToPath(new URL('./cell.ts', here))],
    };
  }
  return { command: process.execPath, args: [fileURLToPath(new URL('./cell.js', here))] };
}

/** Runs one cell in a fresh Node process. */
export function runCellProcess(spec: CellSpec, timeoutMs = 120_000): Promise<CellResult> {
  const { command, args } = cellCommand();
  return new Promise((resolve, reject) => {
    const child = spawn(command, [...args, JSON.stringify(spec)], { stdio: ['ignore', 'pipe', 'pipe'] });
    let out = '';
    let err = '';
    child.stdout.setEncoding('utf8').on('data', (d: string) => (out += d));
    child.stderr.setEncoding('utf8').on('data', (d: string) => (err += d));
    const timer = setTimeout(() => child.kill('SIGKILL'), timeoutMs);
    child.on('error', (e) => {
      clearTimeout(timer);
      reject(e);
    });
    child.on('close', (code, signal) => {
      clearTimeout(timer);
      const line = out.trim().split('\n').pop() ?? '';
      let parsed: (CellResult & { error?: undefined }) | { error: string } | undefined;
      try {
        parsed = JSON.parse(line);
      } catch {
        parsed = undefined;
      }
      if (code === 0 && parsed && parsed.error === undefined) resolve(parsed as CellResult);
      else {
        const why = parsed?.error ?? (signal ? `killed by ${signal}` : `exit code ${code}`);
        reject(
          new TypeError(
            `cell ${spec.id} failed: ${why}${err ? `\n${err.trim().split('\n').slice(-5).join('\n')}` : ''}`,
          ),
        );
      }
    });
  });
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

function round(n: number): number {
  return Math.round(n * 1000) / 1000;
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
