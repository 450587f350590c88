import { spawnSync } from 'node:child_process';
import { mkdir, mkdtemp, readdir, rm, stat, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterEach, beforeEach, describe, expect, it } from 'vitest';
import { makeRunDir, removeStaleRunDirs } from '../src/demo/run-dir.js';

describe("the demo's run directories", () => {
  let parent: string;
  beforeEach(async () => {
    parent = await mkdtemp(join(tmpdir(), 'spw-rundir-test-'));
  });
  afterEach(async () => {
    await rm(parent, { recursive: true, force: true });
  });

  it("removes a killed run's directory, and keeps live runs, the embedded server's and foreign ones", async () => {
    // A pid that surely exited: a child that has already ended.
    const dead = spawnSync(process.execPath, ['-e', '0']).pid;
    const killed = join(parent, 'spillway-demo-killed');
    await mkdir(killed);
    await writeFile(join(killed, 'pid'), `${dead}\n`);
    await writeFile(join(killed, 'dead-letters.ndjson'), '{"bike":"T-1"}\n');
    const mine = await makeRunDir(parent);
    const server = join(parent, 'spillway-demo-pg-abc');
    await mkdir(server);
    await writeFile(join(server, 'pid'), `${dead}\n`);
    const foreign = join(parent, 'spillway-demo-no-pid');
    await mkdir(foreign);

    expect(await removeStaleRunDirs(parent)).toEqual([killed]);
    expect((await readdir(parent)).sort()).toEqual(
      ['spillway-demo-no-pid', 'spillway-demo-pg-abc', mine.slice(parent.length + 1)].sort(),
    );
    // Owner-only, as mkdtemp makes it: the directory holds dead letters.
    expect((await stat(mine)).mode & 0o777).toBe(0o700);
  });
});
