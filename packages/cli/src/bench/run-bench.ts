import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { SpillwayError } from '@spillway/core';
import { applyFlags, type BenchCommandOptions } from './flags.js';
import { defaultPlan, quickPlan } from './plan.js';
import { type Report, reportProblems, writeReport } from './report.js';
import { runSuite } from './run-suite.js';

/** `spillway bench`: runs the grid (or redraws a saved one) and says where the results went. */
export async function runBench(o: BenchCommandOptions, command: string): Promise<void> {
  const markdownPath = o.markdown ?? join(o.out, 'RESULTS.md');
  if (o.reportOnly) {
    const saved = JSON.parse(readFileSync(o.reportOnly, 'utf8')) as Report;
    const problems = reportProblems(saved);
    if (problems.length > 0)
      throw new SpillwayError(
        'SPILLWAY_INVALID_OPTION',
        `${o.reportOnly} is not a well-formed report: ${problems[0]}`,
      );
    const written = await writeReport(saved, { outDir: o.out, markdownPath, command });
    process.stdout.write(`redrew ${written.markdownPath} and ${written.charts.length} chart(s)\n`);
    return;
  }
  const plan = applyFlags(o.quick ? quickPlan() : defaultPlan(), o);
  const started = Date.now();
  const { report, written } = await runSuite({
    plan,
    outDir: o.out,
    markdownPath,
    command,
    log: (line) => process.stderr.write(`${line}\n`),
    onProgress: (p) => {
      const secs = Math.round((Date.now() - started) / 1000);
      const what = p.error
        ? `FAILED ${p.error.split('\n')[0]}`
        : `${Math.round(p.result?.throughput ?? 0)}/s, p99 ${p.result?.latencyMs.p99.toFixed(1)} ms${p.result?.stuck.records ? `, ${p.result.stuck.records} stuck` : ''}`;
      process.stderr.write(`[${p.done}/${p.total} ${secs}s] ${p.cell.id}: ${what}\n`);
    },
  });
  for (const n of report.notes) process.stderr.write(`note: ${n}\n`);
  process.stdout.write(
    `wrote ${written.markdownPath}, ${written.jsonPath} and ${written.charts.length} chart(s)\n`,
  );
}
