import { spawn } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';

const exitChild = fileURLToPath(new URL('./fixtures/exit-child.ts', import.meta.url));
const programChild = fileURLToPath(new URL('./fixtures/program-child.ts', import.meta.url));

interface Run {
  code: number | null;
  stdout: string;
  stderr: string;
}

/** Runs a fixture program; sends `signal` once it prints "ready" (when given). */
function run(file: string, env: Record<string, string>, signal?: NodeJS.Signals): Promise<Run> {
  return new Promise((resolve) => {
    const p = spawn(process.execPath, ['--import', 'tsx', file], {
      env: { ...process.env, ...env },
      stdio: ['ignore', 'pipe', 'pipe'],
    });
    let stdout = '';
    let stderr = '';
    let signalled = false;
    p.stdout.on('data', (d: Buffer) => {
      stdout += d;
      if (signal && !signalled && stdout.includes('ready')) {
        signalled = true;
        p.kill(signal);
      }
    });
    p.stderr.on('data', (d: Buffer) => (stderr += d));
    p.on('exit', (code) => resolve({ code, stdout, stderr }));
  });
}

function lastJson(stdout: string): Record<string, unknown> {
  return JSON.parse(stdout.trim().split('\n').at(-1)!);
}

describe('a program that never calls close()', () => {
  it('flushes its records at maxAgeMs and exits 0 once they are durable', async () => {
    const { code, stdout } = await run(exitChild, { SCENARIO: 'end' });
    expect(code).toBe(0);
    expect(lastJson(stdout)).toMatchObject({ accepted: 3, stored: 3, reasons: ['age'] });
  });

  it('stays alive through retry back-offs until the records are durable', async () => {
    const { code, stdout } = await run(exitChild, { SCENARIO: 'retry' });
    expect(code).toBe(0);
    expect(lastJson(stdout)).toMatchObject({ accepted: 3, stored: 3 });
  });

  it('holds no timer once nothing is pending, so an idle sink never keeps the process up', async () => {
    const { code, stdout } = await run(exitChild, { SCENARIO: 'idle' });
    expect(code).toBe(0);
    expect(lastJson(stdout)).toMatchObject({ stored: 3, timersAfterDrain: 0 });
  });

  it('says on stderr how many records a fatal store error left unwritten and exits 1, not 0', async () => {
    const { code, stdout, stderr } = await run(exitChild, { SCENARIO: 'fatal' });
    expect(code).toBe(1);
    expect(lastJson(stdout)).toMatchObject({ accepted: 3, stored: 0 });
    expect(stderr).toContain(
      'stopped after a fatal error (SPILLWAY_SINK_FAILED) with 3 accepted record(s) not written',
    );
  });

  it('flushes at once on beforeExit when its clock lets the event loop empty with records buffered', async () => {
    const { code, stdout } = await run(exitChild, { SCENARIO: 'unref-clock' });
    expect(code).toBe(0);
    expect(lastJson(stdout)).toMatchObject({ accepted: 3, stored: 3, reasons: ['shutdown'] });
  });
});

// Exit status 128 + signal number is the shell convention (SIGTERM 15 → 143, SIGINT 2 → 130).
describe('a signal while the program awaits write() on a full sink', () => {
  for (const mode of ['loop', 'pipeline', 'pipeInto']) {
    it(`keeps every accepted record and exits 143 on SIGTERM (${mode})`, async () => {
      const { code, stdout, stderr } = await run(programChild, { MODE: mode }, 'SIGTERM');
      expect(stderr).not.toMatch(/unhandled|uncaught/);
      expect(code).toBe(143);
      const report = lastJson(stdout);
      expect(report.accepted).toBeGreaterThanOrEqual(1000);
      expect(report.stored).toBe(report.accepted);
      // The feed outruns the store: writers did wait for room.
      expect(report.backpressureWaits).toBeGreaterThan(0);
    });
  }

  it('keeps every accepted record and exits 130 on SIGINT', async () => {
    const { code, stdout } = await run(programChild, { MODE: 'loop' }, 'SIGINT');
    expect(code).toBe(130);
    const report = lastJson(stdout);
    expect(report.stored).toBe(report.accepted);
  });
});

describe('a crash in the program', () => {
  it('on an uncaught exception logs it, flushes every sink and exits 1', async () => {
    const { code, stdout, stderr } = await run(programChild, { CRASH: 'throw' });
    expect(code).toBe(1);
    expect(stderr).toMatch(/spillway: uncaught exception: Error: dock map lookup failed\n\s+at /);
    expect(stderr).not.toMatch(/rider-4411/);
    const report = lastJson(stdout);
    expect(report.accepted).toBeGreaterThanOrEqual(1000);
    expect(report.stored).toBe(report.accepted);
  });

  it('on an unhandled rejection logs it, flushes every sink and exits 1', async () => {
    const { code, stdout, stderr } = await run(programChild, { CRASH: 'reject' });
    expect(code).toBe(1);
    expect(stderr).toMatch(/spillway: unhandled rejection: Error: station API refused/);
    expect(stderr).not.toMatch(/rider-4411/);
    const report = lastJson(stdout);
    expect(report.stored).toBe(report.accepted);
  });

  it('an error during a running shutdown is logged and does not cut it short', async () => {
    const { code, stdout, stderr } = await run(programChild, { CRASH: 'during-shutdown' }, 'SIGTERM');
    expect(stderr).toMatch(/uncaught exception: Error: feed teardown broke/);
    expect(stderr).toMatch(/during shutdown: the shutdown continues/);
    expect(code).toBe(143);
    const report = lastJson(stdout);
    expect(report.stored).toBe(report.accepted);
  });

  it('with handleCrashes: false leaves the crash to Node, which exits 1 without a shutdown', async () => {
    const { code, stderr } = await run(programChild, { CRASH: 'throw', HANDLE_CRASHES: 'false' });
    expect(code).toBe(1);
    expect(stderr).toMatch(/dock map lookup failed/);
    expect(stderr).not.toMatch(/spillway: shutting down/);
  });
});
