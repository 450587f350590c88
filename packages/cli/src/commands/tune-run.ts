// Runs one tune on the user's own store (a table, Redis keys, a Kafka topic) for `spillway tune`:
// progress on stderr, the report (or --json) on stdout, the chart to a file, and the exit code.
import { mkdir, writeFile } from 'node:fs/promises';
import { dirname, resolve } from 'node:path';
import type { SearchOptions, SearchOutcome, TuneTableEvent } from '@spillway/tuner';

/** The flags every tune on the user's own store shares. */
export interface SearchFlags {
  p99: number;
  shape?: string[];
  rate?: number;
  duration?: number;
  sample?: string;
  timestampColumn?: string;
  headroom?: number;
  budget?: number;
  validate?: number;
  maxConcurrency?: number;
  chart?: string;
  json?: boolean;
}

/** The flags as the tuner's search options; the caller has checked that --shape names one shape. */
export function searchOptions(o: SearchFlags): SearchOptions {
  const shape = o.shape?.[0] as SearchOptions['shape'];
  return {
    p99Ms: o.p99,
    ...(o.sample ? { sample: o.sample } : {}),
    ...(o.timestampColumn ? { timestampColumn: o.timestampColumn } : {}),
    ...(shape ? { shape } : {}),
    ...(o.rate ? { rate: o.rate } : {}),
    ...(o.headroom !== undefined ? { headroom: o.headroom } : {}),
    ...(o.budget ? { budgetMs: o.budget * 1000 } : {}),
    ...(o.duration ? { trialMs: o.duration } : {}),
    ...(o.validate !== undefined ? { validateMs: o.validate * 1000 } : {}),
    ...(o.maxConcurrency ? { maxConcurrency: Math.floor(o.maxConcurrency) } : {}),
  };
}

export const fail = (message: string, code: number) => {
  process.stderr.write(`spillway tune: ${message}\n`);
  process.exitCode = code;
};

/** Writes the tune's progress events to stderr as they come. */
export function progressPrinter(): (e: TuneTableEvent) => void {
  const err = process.stderr;
  const started = Date.now();
  return (e) => {
    const at = `${((Date.now() - started) / 1000).toFixed(0)} s`;
    if (e.kind === 'note') err.write(`${e.text}\n`);
    else if (e.kind === 'plan')
      err.write(
        `Plan: up to ${e.trials} trials, about ${Math.ceil(e.estimateMs / 1000)} s${e.validateMs > 0 ? `, then a ${Math.round(e.validateMs / 1000)} s validation run` : ''}.\n`,
      );
    else if (e.kind === 'trial') {
      const t = e.trial;
      const s = t.settings;
      err.write(
        `  [${e.done}/${e.total} ${at}] maxRecords ${s.maxRecords} maxAgeMs ${s.maxAgeMs} idleMs ${s.idleMs} concurrency ${s.concurrency}: ` +
          `p99 ${t.p99Ms.toFixed(1)} ms, ${Math.round(t.throughput)} records/s, ${Math.round(t.writesPerSecond)} writes/s, ${(t.storeMsPerRecord * 1000).toFixed(1)} µs/record` +
          `${t.deadLettered > 0 ? `, ${t.deadLettered} refused (${t.firstError})` : ''}\n`,
      );
    } else
      err.write(
        `  validating maxRecords ${e.settings.maxRecords} maxAgeMs ${e.settings.maxAgeMs} idleMs ${e.settings.idleMs} concurrency ${e.settings.concurrency} for ${Math.round(e.durationMs / 1000)} s …\n`,
      );
  };
}

/**
 * Runs `tune` and prints its outcome. Exit codes: 0 recommended and validated, 3 no setting met
 * the target, 4 the validation missed, 64 bad input, 69 the server could not be connected to,
 * 130 / 143 interrupted.
 */
export async function runUserTune<O extends SearchOutcome>(
  flags: SearchFlags,
  tune: (onProgress: (e: TuneTableEvent) => void) => Promise<O>,
  show: { report(o: O): string; chart(o: O): string; chartName(o: O): string },
): Promise<void> {
  try {
    const outcome = await tune(progressPrinter());
    const chart = resolve(
      flags.chart ?? `spillway-tune/${show.chartName(outcome).replace(/[^\w.-]+/g, '_')}.svg`,
    );
    if (outcome.trials.length > 0) {
      await mkdir(dirname(chart), { recursive: true });
      await writeFile(chart, show.chart(outcome));
    }
    if (flags.json) process.stdout.write(`${JSON.stringify({ ...outcome, chart }, null, 1)}\n`);
    else process.stdout.write(`${show.report(outcome)}\n\nChart: ${chart}\n`);
    if (!outcome.recommended) process.exitCode = 3;
    else if (outcome.validation && !outcome.validation.holds) process.exitCode = 4;
  } catch (error) {
    const e = error as Error & { code?: string; details?: { signal?: string } };
    if (e.code === 'SPILLWAY_ABORTED') return fail(e.message, e.details?.signal === 'SIGTERM' ? 143 : 130);
    if (e.code === 'SPILLWAY_INVALID_OPTION' || e.code === 'SPILLWAY_INPUT_ERROR') return fail(e.message, 64);
    if (e.code === 'SPILLWAY_STORE_ERROR') return fail(e.message, 69);
    throw error;
  }
}
