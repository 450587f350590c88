import { existsSync, mkdirSync, readdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { join, relative } from 'node:path';
import { FLUSH_REASONS } from '@spillway/core';
import {
  type CellAggregate,
  type MachineInfo,
  type ShapeName,
  type ShapeParams,
  storeLabel,
} from '@spillway/tuner';
import { chartSpec, renderSvg } from './charts.js';
import type { Plan } from './plan.js';

export const REPORT_VERSION = 1;

/** Everything one run produced; written as results.json. */
export interface Report {
  version: number;
  generatedAt: string;
  durationSeconds: number;
  machine: MachineInfo;
  plan: Plan;
  /** Things the reader must know: skipped stores, failed cells. */
  notes: string[];
  cells: CellAggregate[];
}

/** Problems with a report's shape (empty when well formed). The CI smoke test relies on this. */
export function reportProblems(report: unknown): string[] {
  const problems: string[] = [];
  const r = report as Partial<Report>;
  if (typeof r !== 'object' || r === null) return ['report is not an object'];
  if (r.version !== REPORT_VERSION)
    problems.push(`version is ${String(r.version)}, expected ${REPORT_VERSION}`);
  if (typeof r.generatedAt !== 'string' || Number.isNaN(Date.parse(r.generatedAt)))
    problems.push('generatedAt is not a date');
  if (!r.machine || typeof r.machine.cores !== 'number' || typeof r.machine.node !== 'string')
    problems.push('machine info is missing');
  if (!Array.isArray(r.cells) || r.cells.length === 0) return [...problems, 'no cells'];
  for (const c of r.cells) {
    const where = `cell ${c?.id}`;
    if (typeof c?.id !== 'string' || !c.spec) {
      problems.push(`${where}: no id or spec`);
      continue;
    }
    if (!Array.isArray(c.runs) || !Array.isArray(c.errors)) problems.push(`${where}: runs / errors missing`);
    if (c.runs.length + c.errors.length !== r.plan?.repeats)
      problems.push(
        `${where}: ${c.runs.length} runs + ${c.errors.length} errors, expected ${r.plan?.repeats}`,
      );
    for (const run of c.runs) {
      const l = run.latencyMs;
      const finite = [
        run.throughput,
        run.realisedRate,
        l.p50,
        l.p90,
        l.p99,
        l.max,
        run.cpuSeconds,
        run.peakRssMb,
      ].every((v) => Number.isFinite(v) && v >= 0);
      if (!finite) problems.push(`${where}: a figure is not a finite number >= 0`);
      if (!(l.p50 <= l.p90 && l.p90 <= l.p99 && l.p99 <= l.max))
        problems.push(`${where}: percentiles out of order`);
      if (l.count !== run.durable)
        problems.push(`${where}: ${l.count} latency samples for ${run.durable} durable records`);
      if (run.durable + run.stuck.records !== run.offered)
        problems.push(
          `${where}: durable ${run.durable} + stuck ${run.stuck.records} != offered ${run.offered}`,
        );
      const flushes = FLUSH_REASONS.reduce((n, k) => n + (run.flushes[k] ?? 0), 0);
      if (flushes !== run.batches)
        problems.push(`${where}: flushes by reason add up to ${flushes}, batches ${run.batches}`);
    }
  }
  return problems;
}

const fmt = (n: number | null | undefined, digits = 1): string =>
  n === null || n === undefined || !Number.isFinite(n)
    ? '–'
    : n >= 1000
      ? Math.round(n).toLocaleString('en-US')
      : n.toFixed(digits);
const range = ([a, b]: [number, number], digits = 1) =>
  a === b ? '' : ` (${fmt(a, digits)}–${fmt(b, digits)})`;

function settingsOf(c: CellAggregate): string {
  const s = c.spec.settings;
  if (c.spec.variant === 'size-only') return `**size-only** ${s.maxRecords}`;
  if (c.spec.variant === 'per-record') return '**one per record**';
  return `${s.maxRecords} / ${s.maxAgeMs} / ${s.idleMs}${s.concurrency > 1 ? ` / c${s.concurrency}` : ''}`;
}

function flushesOf(c: CellAggregate): string {
  const run = c.runs[Math.floor(c.runs.length / 2)];
  if (!run) return '–';
  return (
    FLUSH_REASONS.filter((r) => run.flushes[r] > 0)
      .map((r) => `${r} ${run.flushes[r]}`)
      .join(', ') || 'none'
  );
}

/** The Markdown table of one store and shape. */
export function markdownTable(cells: CellAggregate[]): string {
  const head =
    '| maxRecords / maxAgeMs / idleMs | offered/s | throughput/s (spread) | p50 ms | p90 ms | p99 ms (spread) | max ms | p99 from due time, ms | stuck at end (oldest ms) | batches (mean size) | flushes by reason | peak buffered rec / KiB | RSS MiB | CPU s | Little L/λW |\n' +
    '|---|---:|---:|---:|---:|---:|---:|---:|---:|---:|---|---:|---:|---:|---:|';
  const rows = cells.map((c) => {
    const m = c.median;
    if (c.runs.length === 0)
      return `| ${settingsOf(c)} | failed: ${c.errors[0]?.split('\n')[0] ?? ''} ||||||||||||||`;
    const stuck = m.stuckRecords > 0 ? `**${fmt(m.stuckRecords, 0)}** (${fmt(m.stuckOldestAgeMs, 0)})` : '0';
    return (
      `| ${settingsOf(c)} | ${fmt(m.realisedRate, 1)} | ${fmt(m.throughput, 1)}${range(c.spread.throughput)} | ${fmt(m.p50)} | ${fmt(m.p90)} | ` +
      `${fmt(m.p99)}${range(c.spread.p99)} | ${fmt(m.max)} | ${fmt(m.scheduledP99)} | ${stuck} | ${fmt(m.batches, 0)} (${fmt(m.meanBatchRecords)}) | ${flushesOf(c)} | ` +
      `${fmt(m.peakBufferedRecords, 0)} / ${fmt(m.peakBufferedBytes / 1024)} | ${fmt(m.peakRssMb, 0)} | ${fmt(m.cpuSeconds, 2)} | ${fmt(m.littleRatio, 3)} |`
    );
  });
  return [head, ...rows].join('\n');
}

/** Groups cells by store label and shape, in plan order. */
export function groups(
  cells: CellAggregate[],
): Array<{ store: string; shape: ShapeName; cells: CellAggregate[] }> {
  const out = new Map<string, { store: string; shape: ShapeName; cells: CellAggregate[] }>();
  for (const c of cells) {
    const store = storeLabel(c.spec.store);
    const key = `${store}|${c.spec.shape.shape}`;
    let g = out.get(key);
    if (!g) {
      g = { store, shape: c.spec.shape.shape, cells: [] };
      out.set(key, g);
    }
    g.cells.push(c);
  }
  return [...out.values()];
}

/** The figures a reader wants first, per store: what batching bought, and what size-only batching lost. */
export function headlines(cells: CellAggregate[]): string[] {
  const lines: string[] = [];
  for (const g of groups(cells)) {
    const ok = g.cells.filter((c) => c.runs.length > 0);
    const spill = ok.filter((c) => c.spec.variant === 'spillway');
    const per = ok.find((c) => c.spec.variant === 'per-record');
    const sizeOnly = ok.filter((c) => c.spec.variant === 'size-only');
    if (spill.length === 0) continue;
    if (g.shape === 'steady') {
      const best = spill.reduce((a, b) => (b.median.throughput > a.median.throughput ? b : a));
      const keeping = spill.filter((c) => c.median.throughput >= 0.95 * best.median.throughput);
      const fastest = keeping.reduce((a, b) => (b.median.p99 < a.median.p99 ? b : a));
      const s = fastest.spec.settings;
      let line =
        `**${g.store}, steady ${fmt(fastest.median.realisedRate, 0)}/s offered:** ${fmt(fastest.median.throughput, 0)} records/s at p99 ` +
        `${fmt(fastest.median.p99)} ms with maxRecords ${s.maxRecords}, maxAgeMs ${s.maxAgeMs} (the lowest p99 within 5 % of the best throughput)`;
      if (per) {
        const ratio = fastest.median.throughput / Math.max(1, per.median.throughput);
        line += `; one write per record: ${fmt(per.median.throughput, 0)} records/s, p99 ${fmt(per.median.p99)} ms`;
        line +=
          ratio >= 1.1
            ? ` — batching carried ${fmt(ratio, 1)}× its throughput`
            : ' — this store keeps up with one write per record at this rate';
      }
      lines.push(`${line}.`);
    } else {
      const worst = sizeOnly.filter((c) => c.median.stuckRecords > 0);
      const spillStuck = Math.max(0, ...spill.map((c) => c.median.stuckRecords));
      const spillP99 = Math.max(...spill.map((c) => c.median.p99));
      if (worst.length > 0) {
        const parts = worst.map(
          (c) =>
            `${c.spec.settings.maxRecords}: ${fmt(c.median.stuckRecords, 0)} of ${fmt(c.runs[0]?.offered ?? 0, 0)} never landed, oldest ${fmt(c.median.stuckOldestAgeMs / 1000, 1)} s`,
        );
        lines.push(
          `**${g.store}, ${g.shape}:** size-only batching (${parts.join('; ')}); every Spillway setting landed ${spillStuck === 0 ? 'everything' : `all but ${spillStuck}`}, worst p99 ${fmt(spillP99)} ms.`,
        );
      }
    }
  }
  return lines;
}

/**
 * The line after which a results page is written by hand (figures of the separate benchmark
 * scripts): a new report keeps that part of the page it replaces, from this line on.
 */
export const HAND_WRITTEN_MARK =
  '<!-- Written by hand from here on (separate scripts, not the grid): `spillway bench` keeps it. -->';

/** The hand-written end of an existing results page, from its mark on; '' when there is none. */
function handWritten(markdownPath: string): string {
  if (!existsSync(markdownPath)) return '';
  const text = readFileSync(markdownPath, 'utf8');
  const at = text.indexOf(HAND_WRITTEN_MARK);
  return at < 0 ? '' : `\n${text.slice(at)}`;
}

export interface WrittenReport {
  jsonPath: string;
  markdownPath: string;
  charts: string[];
}

/**
 * Writes results.json, one SVG chart per store and shape, and the Markdown results page (keeping
 * the hand-written end of the page it replaces, from `HAND_WRITTEN_MARK` on).
 */
export async function writeReport(
  report: Report,
  options: { outDir: string; markdownPath: string; command: string },
): Promise<WrittenReport> {
  const chartsDir = join(options.outDir, 'charts');
  mkdirSync(chartsDir, { recursive: true });
  // Charts of an earlier run whose store or shape is not in this one would mislead: start clean.
  for (const f of readdirSync(chartsDir)) if (f.endsWith('.svg')) rmSync(join(chartsDir, f));
  const jsonPath = join(options.outDir, 'results.json');
  writeFileSync(jsonPath, `${JSON.stringify(report, null, 1)}\n`);
  const charts: string[] = [];
  const sections: string[] = [];
  for (const g of groups(report.cells)) {
    const hasGrid = g.cells.some((c) => c.spec.variant === 'spillway' && c.runs.length > 0);
    let chartLine = '';
    if (hasGrid) {
      const shape = g.cells[0]!.spec.shape;
      const file = join(chartsDir, `${g.store.replace(/[^a-z0-9]+/gi, '-')}-${g.shape}.svg`);
      const subtitle = `${shapeSummary(shape)}; labels: maxRecords; median of ${report.plan.repeats} run(s) per point`;
      writeFileSync(file, await renderSvg(chartSpec(`${g.store}: ${g.shape}`, subtitle, g.cells)));
      charts.push(file);
      chartLine = `\n![${g.store} ${g.shape}](${relative(join(options.markdownPath, '..'), file)})\n`;
    }
    sections.push(
      `### ${g.store} — ${g.shape}\n\n${shapeSummary(g.cells[0]!.spec.shape)}.\n${chartLine}\n${markdownTable(g.cells)}\n`,
    );
  }
  const m = report.machine;
  const servers =
    Object.entries(m.servers)
      .map(([k, v]) => `${k}: ${v}`)
      .join('; ') || 'none';
  const steadyLittle = report.cells.filter(
    (c) => c.spec.shape.shape === 'steady' && c.median.littleRatio !== null,
  );
  const littleBad = steadyLittle.filter((c) => Math.abs((c.median.littleRatio ?? 1) - 1) > 0.1);
  const md = `# Spillway benchmark results

Generated by \`${options.command}\` on ${report.generatedAt} in ${Math.round(report.durationSeconds)} s. Every cell ran in a fresh
Node process, ${report.plan.repeats} time(s); tables show the median and, in brackets, the smallest and largest run.

**Machine.** ${m.cpu}, ${m.cores} cores, ${m.memoryGiB} GiB; ${m.os}; Node ${m.node}; load average ${m.loadAverage1m} at the start
(the machine is shared: compare cells of one run, not runs of different days). **Servers.** ${servers}.

## Headline

${
  headlines(report.cells)
    .map((l) => `- ${l}`)
    .join('\n') || '- (no cell produced figures)'
}

## How to read this

- **Settings** are \`maxRecords / maxAgeMs / idleMs\` of the Spillway sink. **size-only N** is the batcher people write first:
  one array per partition, written when it holds N records, no timer. **one per record** is the sink with \`maxRecords: 1\`.
- **offered/s** is the realised arrival rate over the schedule (the generator is open-loop from a seeded Poisson source; when
  backpressure holds it back past the end of the schedule, the rest is not offered). **throughput/s** is records durable per
  second of load: a setting that cannot keep up holds the generator back and its throughput drops to what it sustains.
- **Latency** is accept → durable (the store acknowledged the batch), in an HdrHistogram. A record still held when the window
  closes (schedule end + grace) is **stuck**: it is counted apart, and the charts place each cell at the p99 over all
  records with stuck ones at their age then — a lower bound of what they will wait.
- **p99 from due time** starts the clock when the schedule said the record arrives, so it adds the time a record waited
  for room (backpressure) — the latency a producer sees. For the Kafka → PostgreSQL bridge it runs from the producer's
  timestamp through the broker and the consumer to the durable write (ms resolution), and **stuck** there counts records
  not yet durable anywhere (most still in the topic: consumer lag).
- **Little L/λW**: the time-average of records held (accepted, not yet durable; from the harness's own clock reads) over
  throughput × mean accept → durable (as the sink reported it). Little's law (J. D. C. Little, 1961) says they are equal;
  a ratio far from 1 means a measurement bug. Checked on steady cells where every record landed: ${steadyLittle.length} checked, ${littleBad.length} off by more than 10 %${littleBad.length ? ` (${littleBad.map((c) => c.id).join(', ')})` : ''}.
- **peak buffered** counts records (and estimated bytes) waiting in the buffer just before a flush took them; CPU seconds are the
  cell process's user + system time over the measured window; RSS is the process's peak.

${report.notes.length ? `## Notes\n\n${report.notes.map((n) => `- ${n}`).join('\n')}\n` : ''}
## Results

${sections.join('\n')}
## Regenerate

\`spillway bench\` (\`npm run bench\` in the repository) runs the default grid (about 15–20 minutes on 2 cores), \`spillway bench --quick\` a minute or two,
or a bigger grid: \`spillway bench --max-records 10,50,100,500,1000,5000 --max-age 5,20,100,500,1000 --idle 0,100 --concurrency 1,4 --repeats 5\`.
Store addresses: \`SPILLWAY_PG_URL\`, \`SPILLWAY_REDIS_URL\`, \`SPILLWAY_KAFKA_BROKERS\` (unset: the Kafka cells are skipped).
Raw figures of every run: [\`results/results.json\`](${relative(join(options.markdownPath, '..'), jsonPath)}).
`;
  writeFileSync(options.markdownPath, md + handWritten(options.markdownPath));
  return { jsonPath, markdownPath: options.markdownPath, charts };
}

function shapeSummary(p: ShapeParams): string {
  const s = (ms: number) => `${(ms / 1000).toFixed(1)} s`;
  switch (p.shape) {
    case 'steady':
      return `steady: Poisson arrivals at ${p.rate}/s over ${p.keys} partitions for ${s(p.durationMs)}`;
    case 'trickle':
      return `trickle: ${p.rate} records/s over ${p.keys} partitions for ${s(p.durationMs)}`;
    case 'skewed':
      return `skewed: partition 0 at ${p.rate}/s, ${p.keys - 1} quiet partitions at ${p.quietRate ?? 0.5}/s each, ${s(p.durationMs)}`;
    case 'burst':
      return `burst: ${p.burstSize ?? 1550} records in ${p.burstSpanMs ?? 30} ms every ${p.burstEveryMs ?? 1000} ms, silence between, ${s(p.durationMs)}`;
    case 'gap':
      return `gap: ${p.rate}/s, silent from ${s(p.gapAtMs ?? 0)} for ${s(p.gapMs ?? 0)}, then again, ${s(p.durationMs)} in all`;
  }
}
