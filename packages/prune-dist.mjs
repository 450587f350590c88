#!/usr/bin/env node
// Run by each package's `prepack`: removes from dist/ what a source that no longer exists left
// behind (tsc --build never deletes the outputs of a removed file), so a tarball holds only the
// current code and every source map names a shipped source. Current outputs are left alone.
import { existsSync, readdirSync, rmSync } from 'node:fs';
import { join, relative } from 'node:path';

const dist = join(process.cwd(), 'dist');
const src = join(process.cwd(), 'src');
const OUTPUT = /\.(d\.ts\.map|d\.ts|js\.map|js)$/;

function prune(dir) {
  for (const entry of readdirSync(dir, { withFileTypes: true })) {
    const path = join(dir, entry.name);
    if (entry.isDirectory()) {
      prune(path);
      if (readdirSync(path).length === 0) rmSync(path, { recursive: true });
      continue;
    }
    const stem = relative(dist, path).replace(OUTPUT, '');
    if (!OUTPUT.test(entry.name) || existsSync(join(src, `${stem}.ts`))) continue;
    rmSync(path);
    process.stderr.write(`prune-dist: removed ${relative(process.cwd(), path)} (its source is gone)\n`);
  }
}

if (existsSync(dist)) prune(dist);
