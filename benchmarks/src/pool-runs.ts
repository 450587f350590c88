/**
 * Pools several runs of an adapter benchmark that compares the sink with the raw driver
 * (`adapters/kafka-producer.js`, `adapters/postgres.js`, `adapters/redis.js`): the goals of issue 19
 * are medians of five runs or more, and one run's ratio moves by ±0.1–0.2 on this shared machine.
 *
 *   node benchmarks/dist/adapters/kafka-producer.js --repeats 9 > run1.txt   # … run5.txt
 *   node benchmarks/dist/pool-runs.js run1.txt run2.txt run3.txt run4.txt run5.txt
 *
 * Each file is a run's standard output: its first JSON line describes the machine (the 1-minute
 * load average is printed per run, so that a reader sees how quiet the runs were), its last one
 * holds the samples. For every case measured on both sides (`raw…` and `sink…` keys, e.g.
 * `raw@1000` and `sink@1000`, `raw:insert@100` and `sink:insert@100`) it prints
 * - per run, the ratio of the sink's median to the raw side's (the figure each run prints), and
 *   the median of those run ratios: the goal's figure;
 * - the pooled pairs: every repeat's sink/raw ratio (the two sides ran back to back), all runs
 *   together, as median and range;
 * - the same two for client CPU per record (`cpu:` keys), where the benchmark measured it:
 *   sink/raw, so lower is better there.
 * For the bridge benchmark (`adapters/kafka-bridge.js`), whose runs hold per-repeat CPU efficiency
 * figures (`cpuEfficiency…` fields), it prints each figure's run medians, their median, and the
 * pooled repeats (median, interquartile range, range).
 * It reads numbers only and asserts nothing.
 */
import { readFileSync } from 'node:fs';
import { summary } from './numbers.js';

type Samples = Record<string, number[]>;

interface Run {
  file: string;
  load: number | undefined;
  samples: Samples;
  /** Per-repeat figures beside the samples (the bridge's `cpuEfficiency…` fields). */
  figures: Record<string, number[]>;
}

function readRun(file: string): Run {
  const lines = readFileSync(file, 'utf8')
    .split('\n')
    .filter((l) => l.startsWith('{'));
  const last = lines.length > 0 ? (JSON.parse(lines[lines.length - 1]!) as Record<string, unknown>) : {};
  if (last.samples === undefined)
    throw new Error(`${file}: no line {"samples": …} (is it the standard output of a finished run?)`);
  const first = JSON.parse(lines[0]!) as { machine?: { loadAverage1m?: number } };
  const figures: Record<string, number[]> = {};
  for (const [key, value] of Object.entries(last))
    if (key.startsWith('cpuEfficiency') && Array.isArray(value) && value.length > 0)
      figures[key] = value as number[];
  return { file, load: first.machine?.loadAverage1m, samples: last.samples as Samples, figures };
}

const median = (xs: number[]) => summary(xs).median;
/** The value below which a fraction `q` of the sorted `xs` lie (linear between neighbours). */
function quantile(xs: number[], q: number): number {
  const s = [...xs].sort((a, b) => a - b);
  const at = (s.length - 1) * q;
  const lo = Math.floor(at);
  return s[lo]! + (s[Math.min(lo + 1, s.length - 1)]! - s[lo]!) * (at - lo);
}
const range = (xs: number[]) => `${Math.min(...xs).toFixed(2)}–${Math.max(...xs).toFixed(2)}`;

/** The cases both sides measured, in the order of the first run: `@1000`, `:insert@100`, … */
function cases(runs: readonly Run[]): string[] {
  const out: string[] = [];
  for (const key of Object.keys(runs[0]!.samples)) {
    if (!key.startsWith('raw')) continue;
    const rest = key.slice('raw'.length);
    if (runs.every((r) => r.samples[`raw${rest}`] && r.samples[`sink${rest}`])) out.push(rest);
  }
  return out;
}

/** Per-run ratios of medians and pooled pair ratios, sink ÷ raw, of `prefix`-ed keys. */
function ratios(
  runs: readonly Run[],
  prefix: string,
  rest: string,
): { runs: number[]; pairs: number[] } | undefined {
  const perRun: number[] = [];
  const pairs: number[] = [];
  for (const run of runs) {
    const raw = run.samples[`${prefix}raw${rest}`];
    const sink = run.samples[`${prefix}sink${rest}`];
    if (raw === undefined || sink === undefined) return undefined;
    perRun.push(median(sink) / median(raw));
    const n = Math.min(raw.length, sink.length);
    for (let i = 0; i < n; i++) pairs.push(sink[i]! / raw[i]!);
  }
  return { runs: perRun, pairs };
}

function main(files: string[]): void {
  if (files.length === 0) {
    console.error('usage: node benchmarks/dist/pool-runs.js RUN_OUTPUT_FILE...');
    process.exitCode = 2;
    return;
  }
  const runs = files.map(readRun);
  console.log(
    `${runs.length} run(s); 1-minute load average at each start: ${runs.map((r) => r.load?.toFixed(2) ?? '?').join(', ')}`,
  );
  for (const key of Object.keys(runs[0]!.figures)) {
    if (!runs.every((r) => r.figures[key] !== undefined)) continue;
    const medians = runs.map((r) => median(r.figures[key]!));
    const all = runs.flatMap((r) => r.figures[key]!);
    console.log(
      `${key}: run medians ${medians.map((x) => x.toFixed(2)).join(' ')} → median of runs ${median(medians).toFixed(2)}; ` +
        `pooled ${all.length} repeats: median ${median(all).toFixed(2)} (IQR ${quantile(all, 0.25).toFixed(2)}–${quantile(all, 0.75).toFixed(2)}, range ${range(all)})`,
    );
  }
  const both = cases(runs);
  if (both.length === 0) return;
  console.log(
    'case            | rate sink/raw: run ratios → median of runs | pooled pairs: median [range] | CPU sink/raw: run ratios → median of runs | pooled pairs',
  );
  for (const rest of both) {
    const rate = ratios(runs, '', rest)!;
    const cpu = ratios(runs, 'cpu:', rest);
    const list = (xs: number[]) => xs.map((x) => x.toFixed(2)).join(' ');
    console.log(
      `${rest.replace(/^:/, '').padEnd(15)} | ${`${list(rate.runs)} → ${median(rate.runs).toFixed(2)}`.padEnd(42)} | ` +
        `${`${median(rate.pairs).toFixed(2)} [${range(rate.pairs)}], ${rate.pairs.length} pairs`.padEnd(28)} | ` +
        (cpu === undefined
          ? 'not measured'
          : `${`${list(cpu.runs)} → ${median(cpu.runs).toFixed(2)}`.padEnd(41)} | ${median(cpu.pairs).toFixed(2)} [${range(cpu.pairs)}]`),
    );
  }
}

main(process.argv.slice(2));
