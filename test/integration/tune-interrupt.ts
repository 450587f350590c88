// Runs `spillway tune` as its own process (from the sources, through tsx) and interrupts it with
// Ctrl-C (SIGINT) once its first trial has begun: the tune tests check that the scratch store is
// gone afterwards and that the process exits 130.
import { spawn } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { waitFor } from '../harness/index.js';

const BIN = fileURLToPath(new URL('../../packages/cli/src/bin.ts', import.meta.url));
// The same source-resolving tsconfig the ingest command's process tests use.
const TSCONFIG = fileURLToPath(new URL('./ingest-cli.tsconfig.json', import.meta.url));

export interface Interrupted {
  /** The scratch store's name, as the tune printed it. */
  scratch: string;
  code: number | null;
  stderr: string;
}

/**
 * `spillway tune …storeArgs` at 300 records/s, p99 300 ms, 1 s trials; once the first trial
 * began, `whileRunning(scratch)` runs (to see the scratch store exists), then SIGINT.
 * `scratchName` finds the scratch store's name in stderr (its first group).
 */
export async function interruptTune(
  storeArgs: readonly string[],
  chart: string,
  scratchName: RegExp,
  whileRunning: (scratch: string) => Promise<void>,
): Promise<Interrupted> {
  const child = spawn(
    process.execPath,
    [
      '--import',
      'tsx',
      BIN,
      'tune',
      ...storeArgs,
      ...['--rate', '300', '--p99', '300', '--budget', '60', '--duration', '1000', '--chart', chart],
    ],
    { env: { ...process.env, TSX_TSCONFIG_PATH: TSCONFIG }, stdio: ['ignore', 'pipe', 'pipe'] },
  );
  let stderr = '';
  child.stderr.on('data', (d: Buffer) => (stderr += d));
  const exited = new Promise<number | null>((resolve) => child.on('exit', (code) => resolve(code)));
  const scratch = await waitFor(
    'the first trial',
    () => (/\[1\/\d+/.test(stderr) ? scratchName.exec(stderr)?.[1] : undefined),
    { timeoutMs: 60_000 },
  );
  await whileRunning(scratch);
  child.kill('SIGINT');
  return { scratch, code: await exited, stderr };
}
