import { spawn } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import type { CellResult } from './cell-result.js';
import type { CellSpec } from './cell-spec.js';

/** Where the cell entry point is: the built `cell.js`, or `cell.ts` through tsx when run from source. */
function cellCommand(): { command: string; args: string[] } {
  const here = import.meta.url;
  if (here.endsWith('.ts')) {
    return {
      command: process.execPath,
      args: ['--import', 'tsx', fileURLToPath(new URL('./cell.ts', here))],
    };
  }
  return { command: process.execPath, args: [fileURLToPath(new URL('./cell.js', here))] };
}

/** Runs one cell in a fresh Node process. */
export function runCellProcess(spec: CellSpec, timeoutMs = 120_000): Promise<CellResult> {
  const { command, args } = cellCommand();
  return new Promise((resolve, reject) => {
    const child = spawn(command, [...args, JSON.stringify(spec)], { stdio: ['ignore', 'pipe', 'pipe'] });
    let out = '';
    let err = '';
    child.stdout.setEncoding('utf8').on('data', (d: string) => (out += d));
    child.stderr.setEncoding('utf8').on('data', (d: string) => (err += d));
    const timer = setTimeout(() => child.kill('SIGKILL'), timeoutMs);
    child.on('error', (e) => {
      clearTimeout(timer);
      reject(e);
    });
    child.on('close', (code, signal) => {
      clearTimeout(timer);
      const line = out.trim().split('\n').pop() ?? '';
      let parsed: (CellResult & { error?: undefined }) | { error: string } | undefined;
      try {
        parsed = JSON.parse(line);
      } catch {
        parsed = undefined;
      }
      if (code === 0 && parsed && parsed.error === undefined) resolve(parsed as CellResult);
      else {
        const why = parsed?.error ?? (signal ? `killed by ${signal}` : `exit code ${code}`);
        reject(
          new TypeError(
            `cell ${spec.id} failed: ${why}${err ? `\n${err.trim().split('\n').slice(-5).join('\n')}` : ''}`,
          ),
        );
      }
    });
  });
}
