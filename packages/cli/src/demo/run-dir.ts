/**
 * The demo's temporary directory (dead-letter and reject files). It is removed at exit; a run
 * killed with SIGKILL cannot do that, so each run writes its pid into its directory and the next
 * run removes the directories whose process is gone.
 */
import { mkdtemp, readdir, readFile, rm, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';

const PREFIX = 'spillway-demo-';
const PID_FILE = 'pid';

/** Creates this run's directory (0700, as mkdtemp makes it) and notes the pid in it. */
export async function makeRunDir(parent = tmpdir()): Promise<string> {
  const dir = await mkdtemp(join(parent, PREFIX));
  await writeFile(join(dir, PID_FILE), `${process.pid}\n`, { mode: 0o600 });
  return dir;
}

/** Removes earlier runs' directories whose process no longer exists; returns what it removed. */
export async function removeStaleRunDirs(parent = tmpdir()): Promise<string[]> {
  let names: string[];
  try {
    names = await readdir(parent);
  } catch {
    return [];
  }
  const removed: string[] = [];
  for (const name of names) {
    // `spillway-demo-pg-*` belongs to the embedded server's helper process, which cleans up itself.
    if (!name.startsWith(PREFIX) || name.startsWith(`${PREFIX}pg-`)) continue;
    const dir = join(parent, name);
    let pid: number;
    try {
      pid = Number((await readFile(join(dir, PID_FILE), 'utf8')).trim());
    } catch {
      continue; // not ours, or from a version without a pid file: leave it
    }
    if (!Number.isInteger(pid) || pid <= 0 || pid === process.pid || alive(pid)) continue;
    await rm(dir, { recursive: true, force: true });
    removed.push(dir);
  }
  return removed;
}

function alive(pid: number): boolean {
  try {
    process.kill(pid, 0);
    return true;
  } catch (error) {
    // EPERM: it exists but belongs to someone else.
    return (error as NodeJS.ErrnoException).code === 'EPERM';
  }
}
