import { resolve } from 'node:path';
import { type Command, InvalidArgumentError } from 'commander';
import type { BenchCommandOptions } from '../bench/flags.js';
import { SHAPE_NAMES, type ShapeName } from '../bench/shape-names.js';

export const list = (v: string): string[] =>
  v
    .split(',')
    .map((s) => s.trim())
    .filter(Boolean);
const numbers = (v: string) =>
  list(v).map((s) => {
    const n = Number(s);
    if (!Number.isFinite(n) || n < 0)
      throw new InvalidArgumentError(`expected comma-separated numbers >= 0, got "${v}"`);
    return n;
  });
export const positive = (v: string): number => {
  const n = Number(v);
  if (!Number.isFinite(n) || n <= 0) throw new InvalidArgumentError(`expected a number > 0, got "${v}"`);
  return n;
};
const positiveInteger = (v: string): number => {
  const n = Number(v);
  if (!Number.isInteger(n) || n < 1) throw new InvalidArgumentError(`expected an integer >= 1, got "${v}"`);
  return n;
};
export const shapes = (v: string): ShapeName[] => {
  const out = list(v);
  for (const s of out)
    if (!(SHAPE_NAMES as readonly string[]).includes(s))
      throw new InvalidArgumentError(`expected shapes among ${SHAPE_NAMES.join(', ')}, got "${s}"`);
  return out as ShapeName[];
};

/**
 * Registers `bench`: the benchmark grid, each cell in a fresh process. The grid, the report and
 * the charts (vega) load when the command runs, not when `spillway` starts.
 */
export function registerBench(program: Command): void {
  program
    .command('bench')
    .description(
      'Run the benchmark grid (each cell in a fresh process) and write RESULTS.md, results.json and SVG charts.',
    )
    .option('--quick', 'a small grid: two stores, two shapes, one run per cell')
    .option(
      '--stores <list>',
      'noop, sim[/<ms>], postgres[/insert|copy|upsert], redis, kafka, bridge[/<pg mode>] (Kafka: SPILLWAY_KAFKA_BROKERS)',
      list,
    )
    .option('--shapes <list>', `shapes: ${SHAPE_NAMES.join(', ')}`, shapes)
    .option('--max-records <list>', 'maxRecords values', numbers)
    .option('--max-age <list>', 'maxAgeMs values', numbers)
    .option('--idle <list>', 'idleMs values (0 = off)', numbers)
    .option('--concurrency <list>', 'concurrency values', numbers)
    .option('--size-only <list>', 'maxRecords of the size-only baseline', numbers)
    .option('--repeats <n>', 'runs per cell', positiveInteger)
    .option('--rate <n>', 'records/s of the steady shape', positive)
    .option('--duration <ms>', 'length of every shape, ms', positive)
    .option('--full-grid', 'use the main grid on every shape, not the smaller one off steady')
    .option('--out <dir>', 'where results.json, charts/ and RESULTS.md go', 'spillway-bench')
    .option('--markdown <file>', 'where the results page goes (default <out>/RESULTS.md)')
    .option('--report-only <results.json>', 'redraw the results page and charts from a saved results.json')
    .action(async (o: BenchCommandOptions) => {
      const { runBench } = await import('../bench/run-bench.js');
      await runBench({ ...o, out: resolve(o.out) }, `spillway ${process.argv.slice(2).join(' ')}`);
    });
}
