// Runs one `spillway` subcommand in the test's own process, as the bin would parse it, and
// collects its exit code and what it printed (stdout and stderr are captured, not shown).
import { Command, CommanderError, type Command as CommandType } from 'commander';
import { vi } from 'vitest';

export interface CliRun {
  code: number;
  out: string;
  err: string;
}

/** `spillway <subcommand> …args` with the subcommand that `register` adds. */
export async function runSubcommand(
  register: (program: CommandType) => void,
  subcommand: string,
  args: readonly string[],
): Promise<CliRun> {
  const program = new Command().name('spillway').exitOverride();
  register(program);
  let out = '';
  let err = '';
  const o = vi.spyOn(process.stdout, 'write').mockImplementation((c: string | Uint8Array) => {
    out += String(c);
    return true;
  });
  const e = vi.spyOn(process.stderr, 'write').mockImplementation((c: string | Uint8Array) => {
    err += String(c);
    return true;
  });
  process.exitCode = undefined;
  let code: number;
  try {
    await program.parseAsync(['node', 'spillway', subcommand, ...args]);
    code = Number(process.exitCode ?? 0);
  } catch (error) {
    if (!(error instanceof CommanderError)) throw error;
    code = error.exitCode;
    err += error.message;
  } finally {
    o.mockRestore();
    e.mockRestore();
    process.exitCode = undefined;
  }
  return { code, out, err };
}
