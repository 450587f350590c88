#!/usr/bin/env node
// `npm run bench`: runs the benchmark grid and regenerates benchmarks/RESULTS.md, results/results.json
// and the SVG charts. Flags narrow or widen the grid; see --help.
import { readFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { Command } from 'commander';
import type { Plan } from './plan.js';
import { type Report, reportProblems, writeReport } from './report.js';
import { SHAPES } from './shapes.js';
import { applyFlags, type BenchFlags, defaultPlan, quickPlan, runSuite } from './suite-run.js';

const list = (v: string) =>
  v
    .split(',')
    .map((s) => s.trim())
    .filter(Boolean);
const numbers = (name: string) => (v: string) =>
  list(v).map((s) => {
    const n = Number(s);
    if (!Number.isFinite(n) || n < 0)
      throw new TypeError(`Expected \`${name}\` to be a comma-separated list of numbers >= 0, got \`${v}\``);
    return n;
  });

const program = new Command()
  .name('spillway-bench')
  .description('Runs the Spillway benchmark grid; each cell in a fresh process.')
  .option('--quick', 'a small grid (a minute or two)')
  .option(
    '--stores <list>',
    'stores: noop, sim[/<ms>], postgres[/insert|copy|upsert], redis, kafka, bridge[/<pg mode>]',
    list,
  )
  .option('--shapes <list>', `shapes for every store: ${SHAPES.join(', ')}`, list)
  .option('--max-records <list>', 'maxRecords values', numbers('--max-records'))
  .option('--max-age <list>', 'maxAgeMs values', numbers('--max-age'))
  .option('--idle <list>', 'idleMs values (0 = off)', numbers('--idle'))
  .option('--concurrency <list>', 'concurrency values', numbers('--concurrency'))
  .option('--size-only <list>', 'maxRecords of the size-only baseline', numbers('--size-only'))
  .option('--repeats <n>', 'runs per cell', Number)
  .option('--rate <n>', 'records/s of the steady shape', Number)
  .option('--duration <ms>', 'length of every shape, ms', Number)
  .option('--out <dir>', 'where results.json and charts/ go (default benchmarks/results)')
  .option('--markdown <file>', 'the results page (default benchmarks/RESULTS.md)')
  .option('--full-grid', 'use the main grid on every shape, not the smaller one off steady')
  .option(
    '--report-only <results.json>',
    'redraw RESULTS.md and the charts from a saved results.json, running nothing',
  );

program.parse();
const o = program.opts<
  BenchFlags & { quick?: boolean; out?: string; markdown?: string; reportOnly?: string }
>();

if (o.reportOnly) {
  const saved = JSON.parse(readFileSync(o.reportOnly, 'utf8')) as Report;
  const problems = reportProblems(saved);
  if (problems.length > 0) throw new TypeError(`${o.reportOnly} is not a well-formed report: ${problems[0]}`);
  const written = await writeReport(saved, {
    outDir: o.out ?? dirname(o.reportOnly),
    markdownPath: o.markdown ?? join(dirname(o.reportOnly), '..', 'RESULTS.md'),
    command: 'npm run bench',
  });
  process.stdout.write(`redrew ${written.markdownPath} and ${written.charts.length} chart(s)\n`);
  process.exit(0);
}

const plan: Plan = applyFlags(o.quick ? quickPlan() : defaultPlan(), o);

const started = Date.now();
const { report, written } = await runSuite({
  plan,
  ...(o.out ? { outDir: o.out } : {}),
  ...(o.markdown ? { markdownPath: o.markdown } : {}),
  command: `npm run bench${process.argv.length > 2 ? ` -- ${process.argv.slice(2).join(' ')}` : ''}`,
  log: (line) => process.stderr.write(`${line}\n`),
  onProgress: (p) => {
    const secs = Math.round((Date.now() - started) / 1000);
    const what = p.error
      ? `FAILED ${p.error.split('\n')[0]}`
      : `${Math.round(p.result?.throughput ?? 0)}/s p99 ${p.result?.latencyMs.p99.toFixed(1)} ms${p.result?.stuck.records ? `, ${p.result.stuck.records} stuck` : ''}`;
    process.stderr.write(`[${p.done}/${p.total} ${secs}s] ${p.cell.id}: ${what}\n`);
  },
});
for (const n of report.notes) process.stderr.write(`note: ${n}\n`);
process.stdout.write(
  `wrote ${written.markdownPath}, ${written.jsonPath} and ${written.charts.length} chart(s)\n`,
);
