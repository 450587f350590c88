// The README's first example ("A sink in twenty lines"), compiled as it stands and run as its own
// process against the real PostgreSQL, in copy mode and (with that one word changed) insert mode:
// a signal in the middle of an endless feed, a short feed and no close(), a crash in the user's
// code. Each run writes into a fresh schema; the table's contents are compared with what the
// sink accepted (printed by the only line the test adds, an 'exit' listener).
//
// Exit codes: 128 + the signal number (143 for SIGTERM, 130 for SIGINT) — shell convention, and
// what Kubernetes' documentation (Pod Lifecycle, Termination of Pods) expects of a SIGTERM.
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { type DockRun, readmeProgram, runDockStatus } from './readme/dock-status.js';
import { compiledProject, type Program, type ReadmeProject } from './readme/project.js';
import { describeRun, instrumented, replaced } from './readme/run.js';

const RUNS = 5;
const base = readmeProgram('sink-in-twenty-lines');
const copy = instrumented(base, 'first-copy', 'docks');
const insert = instrumented(
  replaced(base, 'insert', "mode: 'copy',", "mode: 'insert',"),
  'first-insert',
  'docks',
);
// The user's own code fails once the sink has taken 20,000 reports: a throw in a timer
// (uncaughtException) or a promise nobody handles (unhandledRejection).
const crashWhen = (how: string) => [
  'const crash = setInterval(() => {',
  '  if (docks.snapshot().accepted < 20_000) return;',
  '  clearInterval(crash);',
  `  ${how}`,
  '}, 5);',
];
const thrown = instrumented(
  base,
  'first-crash-throw',
  'docks',
  crashWhen("throw new Error('a bug elsewhere');"),
);
const rejected = instrumented(
  base,
  'first-crash-rejection',
  'docks',
  crashWhen("void Promise.reject(new Error('a bug elsewhere'));"),
);
// … or the program's own loop throws on its 30,001st report (the module's top-level await rejects).
const loopThrows = instrumented(
  replaced(
    base,
    'loop-throws',
    'for await (const status of dockFeed()) await docks.write(status);',
    "let seen = 0;\nfor await (const status of dockFeed()) { if (++seen > 30_000) throw new Error('a bug in the loop'); await docks.write(status); }",
  ),
  'first-crash-in-loop',
  'docks',
);
// As it stands, without the exit listener (which reads `docks`, never declared when the
// dead-letter check throws).
const plain: Program = { ...base, name: 'first-plain' };
const programs: Program[] = [copy, insert, thrown, rejected, loopThrows, plain];

let project: ReadmeProject;
beforeAll(async () => {
  project = await compiledProject(programs);
});
afterAll(() => project?.remove());

/** The table holds reports 0 … accepted − 1 of the feed, each once: nothing accepted was lost. */
function expectEveryAcceptedReport(run: DockRun, exitCode: number): void {
  const { result, table } = run;
  expect(result.code, describeRun(result)).toBe(exitCode);
  expect(result.report, describeRun(result)).toBeDefined();
  const report = result.report!;
  expect(table.rows).toBe(report.accepted);
  expect(table.distinctTimes).toBe(table.rows);
  if (table.rows > 0) {
    expect(table.firstSecond).toBe(0);
    expect(table.lastSecond).toBe(table.rows - 1);
  }
  expect(report.written).toBe(report.accepted);
  expect(report.deadLettered).toBe(0);
  expect(report.pendingRecords).toBe(0);
  expect(run.deadLettered).toBe(false);
}

async function signalRuns(js: string, signal: NodeJS.Signals, exitCode: number): Promise<number[]> {
  const accepted: number[] = [];
  for (let i = 0; i < RUNS; i++) {
    // Each run is signalled at another point of the stream: after 1, 15,001, 30,001, … rows.
    const run = await runDockStatus(js, { signal, afterRows: 1 + i * 15_000 });
    expectEveryAcceptedReport(run, exitCode);
    expect(run.table.rows).toBeGreaterThan(0);
    expect(run.result.stderr).toContain(`shutting down (${signal})`);
    accepted.push(run.table.rows);
  }
  return accepted;
}

async function shortRuns(js: string): Promise<void> {
  for (let i = 0; i < RUNS; i++) {
    const run = await runDockStatus(js, { limit: 3 });
    expectEveryAcceptedReport(run, 0);
    expect(run.table.rows).toBe(3);
  }
}

describe.concurrent('the README first example as a program', () => {
  for (const [mode, p] of [
    ['copy', copy],
    ['insert', insert],
  ] as const) {
    it(`exits 143 on SIGTERM mid-stream with every accepted report in the table (${mode} mode, ${RUNS} runs)`, async () => {
      const accepted = await signalRuns(project.js(p.name), 'SIGTERM', 143);
      console.log(`${mode} SIGTERM: accepted = rows per run ${accepted.join(', ')}`);
    });

    it(`exits 130 on SIGINT mid-stream with every accepted report in the table (${mode} mode, ${RUNS} runs)`, async () => {
      const accepted = await signalRuns(project.js(p.name), 'SIGINT', 130);
      console.log(`${mode} SIGINT: accepted = rows per run ${accepted.join(', ')}`);
    });

    it(`exits 0 after a feed of 3 reports and no close(), with the 3 rows in the table (${mode} mode, ${RUNS} runs)`, async () => {
      await shortRuns(project.js(p.name));
    });
  }

  for (const [p, when, logged] of [
    [thrown, 'user code throws (uncaughtException)', 'uncaught exception'],
    [rejected, 'a promise rejection nobody handles (unhandledRejection)', 'unhandled rejection'],
  ] as const) {
    it(`flushes what it accepted and exits 1 when ${when} (2 runs)`, async () => {
      for (let i = 0; i < 2; i++) {
        const run = await runDockStatus(project.js(p.name), {});
        expectEveryAcceptedReport(run, 1);
        expect(run.table.rows).toBeGreaterThanOrEqual(20_000);
        expect(run.result.stderr).toContain(`${logged}: Error: a bug elsewhere`);
      }
    });
  }

  it('flushes the 30,000 reports it accepted and exits 1 when its own loop throws', async () => {
    const run = await runDockStatus(project.js(loopThrows.name), {});
    expectEveryAcceptedReport(run, 1);
    expect(run.table.rows).toBe(30_000);
    expect(run.result.stderr).toContain('uncaught exception: Error: a bug in the loop');
  });

  it('stops before taking a report when the dead-letter directory does not exist, naming the path', async () => {
    const missing = '/nonexistent-spillway-dir/dock-status.dead.ndjson';
    const run = await runDockStatus(project.js(plain.name), { limit: 3, env: { DEAD_LETTER_FILE: missing } });
    expect(run.result.code, describeRun(run.result)).toBe(1);
    expect(run.result.stderr).toContain('SPILLWAY_DEAD_LETTER_UNWRITABLE');
    expect(run.result.stderr).toContain(missing);
    expect(run.result.stderr).toContain('ENOENT');
    expect(run.table.rows).toBe(0);
  });
});
