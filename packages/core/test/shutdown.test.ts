import { spawn } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { ShutdownCoordinator } from '../src/index.js';

const child = fileURLToPath(new URL('./fixtures/shutdown-child.ts', import.meta.url));

function run(signal: NodeJS.Signals, env: Record<string, string> = {}, second = false) {
  return new Promise<{ code: number | null; stdout: string; stderr: string }>((resolve) => {
    const p = spawn(process.execPath, ['--import', 'tsx', child], {
      env: { ...process.env, ...env },
      stdio: ['ignore', 'pipe', 'pipe'],
    });
    let stdout = '';
    let stderr = '';
    p.stdout.on('data', (d: Buffer) => {
      stdout += d;
      if (stdout.includes('ready') && !p.killed) {
        p.kill(signal);
        if (second) setTimeout(() => p.kill(signal), 100);
      }
    });
    p.stderr.on('data', (d: Buffer) => (stderr += d));
    p.on('exit', (code) => resolve({ code, stdout, stderr }));
  });
}

describe('shutdown coordinator', () => {
  it('runs stages in order: sources, sinks, progress, clients', async () => {
    const order: string[] = [];
    const c = new ShutdownCoordinator({ log: () => {} });
    c.add('clients', 'pool', () => void order.push('clients'));
    c.add('progress', 'commit', () => void order.push('progress'));
    c.add('sinks', 'sink', async () => {
      await new Promise((r) => setTimeout(r, 10));
      order.push('sinks');
    });
    c.add('sources', 'consumer', () => void order.push('sources'));
    const report = await c.shutdown('test');
    expect(order).toEqual(['sources', 'sinks', 'progress', 'clients']);
    expect(report.ok).toBe(true);
    expect(c.signal.aborted).toBe(true);
  });

  it('reports a step that overruns the deadline and still runs the later stages', async () => {
    const order: string[] = [];
    const c = new ShutdownCoordinator({ timeoutMs: 50, log: () => {} });
    c.add(
      'sinks',
      'stuck sink',
      () => new Promise(() => {}),
      () => ({ buffered: 3, inFlight: 2, retrying: 2 }),
    );
    c.add('clients', 'pool', () => void order.push('clients'));
    const report = await c.shutdown('test', 15);
    expect(report.ok).toBe(false);
    expect(report.exitCode).toBe(1);
    expect(report.steps.find((s) => s.name === 'stuck sink')?.error).toMatch(/3 buffered, 2 in flight/);
  });

  // Source: Kubernetes documentation, "Pod Lifecycle — Termination of Pods" (SIGTERM, then
  // SIGKILL after the grace period); shell convention: exit status 128 + signal number.
  it('on SIGTERM flushes every accepted record and exits 143', async () => {
    const { code, stdout } = await run('SIGTERM');
    expect(code).toBe(143);
    const report = JSON.parse(stdout.trim().split('\n').at(-1)!);
    expect(report.accepted).toBeGreaterThanOrEqual(1000);
    expect(report.stored).toBe(report.accepted);
  });

  it('on SIGINT exits 130', async () => {
    const { code } = await run('SIGINT');
    expect(code).toBe(130);
  });

  it('a second signal forces exit and prints what is still pending', async () => {
    const { code, stderr } = await run('SIGTERM', { WRITE_MS: '5000', TIMEOUT_MS: '20000' }, true);
    expect(code).toBe(143);
    expect(stderr).toMatch(/forcing exit/);
    expect(stderr).toMatch(/still pending: sink slow: \d+ buffered, \d+ in flight/);
  });
});
