// CI smoke of the benchmark suite: one tiny cell per shape against the no-op store and the
// shared PostgreSQL, each in a fresh process, through to results.json, RESULTS.md and the charts.
// It checks that the report is produced and well formed; it asserts nothing about speed.
import { existsSync, mkdtempSync, readFileSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { SHAPES } from '@spillway/tuner';
import { afterAll, describe, expect, it } from 'vitest';
import type { Plan } from '../../packages/cli/src/bench/plan.js';
import { type Report, reportProblems } from '../../packages/cli/src/bench/report.js';
import { runSuite } from '../../packages/cli/src/bench/run-suite.js';
import { services } from '../harness/index.js';

describe('the benchmark suite', () => {
  const dir = mkdtempSync(join(tmpdir(), 'spillway-bench-smoke-'));
  afterAll(() => rmSync(dir, { recursive: true, force: true }));

  it('produces a well-formed report for one tiny cell per shape on the no-op store and PostgreSQL', async () => {
    const { pgUrl } = services();
    const tiny = { durationMs: 300, rate: 500 };
    const plan: Plan = {
      stores: [
        { store: { kind: 'noop' }, shapes: [...SHAPES] },
        { store: { kind: 'postgres', mode: 'insert', url: pgUrl }, shapes: [...SHAPES] },
      ],
      maxRecords: [100],
      maxAgeMs: [20],
      idleMs: [20],
      concurrency: [1],
      sizeOnly: [],
      perRecord: false,
      repeats: 1,
      shapeOverrides: {
        steady: tiny,
        trickle: { durationMs: 300, rate: 20 },
        skewed: { ...tiny, keys: 4 },
        burst: { durationMs: 300, burstSize: 120, burstEveryMs: 200, burstSpanMs: 10 },
        gap: { ...tiny, gapAtMs: 100, gapMs: 100 },
      },
    };
    const markdownPath = join(dir, 'RESULTS.md');
    const { report, written } = await runSuite({ plan, outDir: dir, markdownPath, command: 'bench smoke' });

    expect(report.notes).toEqual([]);
    expect(report.cells).toHaveLength(2 * SHAPES.length);
    for (const cell of report.cells)
      expect({ id: cell.id, errors: cell.errors, runs: cell.runs.length }).toEqual({
        id: cell.id,
        errors: [],
        runs: 1,
      });
    const json = JSON.parse(readFileSync(written.jsonPath, 'utf8')) as Report;
    expect(reportProblems(json)).toEqual([]);
    expect(json.machine.servers.PostgreSQL).toMatch(/^PostgreSQL \d+/);
    for (const cell of json.cells) {
      const run = cell.runs[0]!;
      // Every offered record of a Spillway cell lands inside the window: age and idle flushes.
      expect(run.stuck.records).toBe(0);
      expect(run.durable).toBe(run.offered);
    }
    expect(written.charts).toHaveLength(2 * SHAPES.length);
    for (const chart of written.charts) expect(readFileSync(chart, 'utf8').startsWith('<svg')).toBe(true);
    expect(existsSync(markdownPath)).toBe(true);
    expect(readFileSync(markdownPath, 'utf8')).toContain('### postgres/insert — burst');
  });
});
