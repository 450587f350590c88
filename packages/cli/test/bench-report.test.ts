import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { aggregate, type CellResult, type CellSpec, machineInfo, runCell } from '@spillway/tuner';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { cellsOf, type Plan } from '../src/bench/plan.js';
import {
  HAND_WRITTEN_MARK,
  REPORT_VERSION,
  type Report,
  reportProblems,
  writeReport,
} from '../src/bench/report.js';

// A tiny plan on the engine-only stores: every variant on two shapes, 300–600 ms each.
const plan: Plan = {
  stores: [{ store: { kind: 'sim', latencyMs: 1, perRecordUs: 1 }, shapes: ['steady', 'trickle'] }],
  maxRecords: [50],
  maxAgeMs: [20],
  idleMs: [10],
  concurrency: [1],
  sizeOnly: [50],
  perRecord: true,
  repeats: 1,
  shapeOverrides: { steady: { durationMs: 300, rate: 1000 }, trickle: { durationMs: 600, rate: 20 } },
};

describe('a benchmark report', () => {
  let dir: string;
  let report: Report;
  const results = new Map<string, CellResult>();

  beforeAll(async () => {
    dir = mkdtempSync(join(tmpdir(), 'spillway-bench-report-'));
    const cells = cellsOf(plan).map((c): CellSpec => ({ ...c, graceMs: 300 }));
    const aggregates = [];
    for (const cell of cells) {
      const r = await runCell(cell);
      results.set(cell.id, r);
      aggregates.push(aggregate(cell, [r], []));
    }
    report = {
      version: REPORT_VERSION,
      generatedAt: new Date().toISOString(),
      durationSeconds: 1,
      machine: machineInfo(),
      plan,
      notes: [],
      cells: aggregates,
    };
  });
  afterAll(() => rmSync(dir, { recursive: true, force: true }));

  it('is well formed: every count adds up and percentiles are in order', () => {
    expect(reportProblems(report)).toEqual([]);
  });

  it('flags a report whose figures do not add up', () => {
    const broken = structuredClone(report);
    const run = broken.cells[0]!.runs[0]!;
    run.durable += 1;
    run.latencyMs.p50 = run.latencyMs.max + 1;
    const problems = reportProblems(broken);
    expect(problems.some((p) => p.includes('percentiles out of order'))).toBe(true);
    expect(problems.some((p) => p.includes('!= offered'))).toBe(true);
    expect(reportProblems({ version: 0 })).not.toEqual([]);
  });

  it('shows the size-only baseline stranding every trickle record while the sink lands them all', () => {
    const stuck = [...results.values()].find(
      (r) => r.spec.variant === 'size-only' && r.spec.shape.shape === 'trickle',
    )!;
    const sink = [...results.values()].find(
      (r) => r.spec.variant === 'spillway' && r.spec.shape.shape === 'trickle',
    )!;
    expect(stuck.offered).toBeGreaterThan(0);
    expect(stuck.stuck.records).toBe(stuck.offered);
    expect(stuck.durable).toBe(0);
    expect(stuck.little.ratio).toBeNull(); // a window with stuck records cannot balance
    expect(sink.stuck.records).toBe(0);
    expect(sink.durable).toBe(sink.offered);
  });

  it("agrees with Little's law on the steady cells", () => {
    for (const r of results.values()) {
      if (r.spec.shape.shape !== 'steady' || r.spec.variant === 'size-only') continue;
      // Source: J. D. C. Little (1961), L = λW: mean records held = arrival rate × mean time held.
      expect(r.little.ratio).not.toBeNull();
      expect(Math.abs(r.little.ratio! - 1)).toBeLessThan(0.1);
    }
  });

  it('is written as JSON, a Markdown page with one table per store and shape, and SVG charts', async () => {
    const markdownPath = join(dir, 'RESULTS.md');
    const written = await writeReport(report, { outDir: dir, markdownPath, command: 'test' });
    const json = JSON.parse(readFileSync(written.jsonPath, 'utf8')) as Report;
    expect(reportProblems(json)).toEqual([]);
    expect(json.cells).toHaveLength(report.cells.length);
    const md = readFileSync(markdownPath, 'utf8');
    expect(md.match(/^\| maxRecords \/ maxAgeMs \/ idleMs/gm)).toHaveLength(2);
    expect(md).toContain('**size-only** 50');
    expect(md).toContain(`${machineInfo().cores} cores`);
    expect(written.charts).toHaveLength(2);
    for (const chart of written.charts) {
      const svg = readFileSync(chart, 'utf8');
      expect(svg.startsWith('<svg')).toBe(true);
      expect(svg).toContain('maxAgeMs 20');
      expect(svg).toContain('size-only');
    }
  });

  it('keeps the hand-written end of the page it replaces, from the mark on, and nothing of the rest', async () => {
    const markdownPath = join(dir, 'RESULTS-kept.md');
    const kept = `${HAND_WRITTEN_MARK}\n\n## Engine core (separate scripts)\n\n| write() | 0.44 |\n`;
    writeFileSync(markdownPath, `# an old generated page\n\n## Headline\n\n- old figure\n\n${kept}`);
    await writeReport(report, { outDir: dir, markdownPath, command: 'test' });
    const md = readFileSync(markdownPath, 'utf8');
    expect(md.endsWith(kept)).toBe(true);
    expect(md).not.toContain('old figure');
    expect(md.match(/^## Headline/gm)).toHaveLength(1);
    // A page without the mark keeps nothing of its own.
    writeFileSync(markdownPath, '# no mark here\n\nhand-made text\n');
    await writeReport(report, { outDir: dir, markdownPath, command: 'test' });
    expect(readFileSync(markdownPath, 'utf8')).not.toContain('hand-made text');
  });
});
