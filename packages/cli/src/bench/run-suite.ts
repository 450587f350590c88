import { type CellResult, machineInfo, type RunProgress, runCells, storeLabel } from '@spillway/tuner';
import { cellsOf, type Plan, type StorePlan } from './plan.js';
import { REPORT_VERSION, type Report, type WrittenReport, writeReport } from './report.js';

export interface SuiteOptions {
  plan: Plan;
  /** Where results.json and charts/ go. */
  outDir: string;
  /** Where the results page goes. */
  markdownPath: string;
  /** Shown in RESULTS.md as the command that made it. */
  command: string;
  onProgress?: (p: RunProgress) => void;
  log?: (line: string) => void;
  env?: NodeJS.ProcessEnv;
}

/** Runs a plan, each cell in fresh processes, and writes results.json, the charts and RESULTS.md. */
export async function runSuite(options: SuiteOptions): Promise<{ report: Report; written: WrittenReport }> {
  const log = options.log ?? (() => {});
  const started = Date.now();
  const notes: string[] = [];
  const plan = structuredClone(options.plan);
  const servers: Record<string, string> = {};

  // Kafka cells write to brokers the user names (SPILLWAY_KAFKA_BROKERS, read by parseStore);
  // without one they are skipped with a note rather than failing every run.
  const isKafka = (s: StorePlan) => s.store.kind === 'kafka' || s.store.kind === 'bridge';
  const unreachable = plan.stores.filter((s) => isKafka(s) && !s.store.brokers?.length);
  if (unreachable.length > 0) {
    notes.push(
      `Kafka cells skipped (${unreachable.map((s) => storeLabel(s.store)).join(', ')}): no broker; set SPILLWAY_KAFKA_BROKERS to host:port[,host:port].`,
    );
    plan.stores = plan.stores.filter((s) => !unreachable.includes(s));
  }
  if (plan.stores.some(isKafka)) servers.Kafka = 'external (SPILLWAY_KAFKA_BROKERS)';

  const machine = machineInfo(servers);
  const cells = cellsOf(plan);
  log(
    `${cells.length} cells × ${plan.repeats} run(s) over ${plan.stores.map((s: StorePlan) => storeLabel(s.store)).join(', ')}`,
  );
  const results = await runCells(cells, plan.repeats, options.onProgress);
  for (const c of results) {
    for (const r of c.runs as CellResult[])
      if (r.storeVersion) machine.servers[r.storeVersion.split(' ')[0]!] = r.storeVersion;
    if (c.runs.length === 0)
      notes.push(`${c.id}: every run failed — ${c.errors[0]?.split('\n')[0] ?? 'unknown error'}`);
    else if (c.errors.length > 0)
      notes.push(
        `${c.id}: ${c.errors.length} of ${plan.repeats} runs failed — ${c.errors[0]?.split('\n')[0]}`,
      );
  }
  const report: Report = {
    version: REPORT_VERSION,
    generatedAt: new Date(started).toISOString(),
    durationSeconds: Math.round((Date.now() - started) / 1000),
    machine,
    plan,
    notes,
    cells: results,
  };
  const written = await writeReport(report, {
    outDir: options.outDir,
    markdownPath: options.markdownPath,
    command: options.command,
  });
  return { report, written };
}
