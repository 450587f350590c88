// A throwaway project outside the repository, laid out as a user's would be: package.json with
// "type": "module", a strict NodeNext tsconfig, and the README programs as .ts files. Its
// node_modules is a link to the workspace's, so `@spillway/*` resolve to the workspace packages
// the way an installed package does (their `exports`, i.e. the built dist/ and its .d.ts files).
import { execFile } from 'node:child_process';
import {
  existsSync,
  mkdirSync,
  mkdtempSync,
  readdirSync,
  rmSync,
  statSync,
  symlinkSync,
  writeFileSync,
} from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { programOf, type ReadmeBlock, repoRoot } from './blocks.js';

export interface ReadmeProject {
  dir: string;
  /** The compiled JavaScript of a program written with `write()`. */
  js(name: string): string;
  remove(): void;
}

/** One README line per program line, so a compiler message can point into the README. */
export interface Program {
  name: string;
  source: string;
  origin: string[];
}

/** The program of a block, with the README position of each of its lines. */
export function program(block: ReadmeBlock, all: readonly ReadmeBlock[], name = block.name): Program {
  const origin: string[] = [];
  const lineOrigins = (b: ReadmeBlock): string[] => {
    const own = b.code
      .trimEnd()
      .split('\n')
      .map((_, i) => `${b.file}:${b.line + 1 + i}`);
    if (b.ends === undefined) return own;
    const base = all.find((x) => x.name === b.ends)!;
    return [...lineOrigins(base).slice(0, -1), ...own];
  };
  origin.push(...lineOrigins(block));
  return { name, source: programOf(block, all), origin };
}

const TSCONFIG = {
  compilerOptions: {
    strict: true,
    module: 'NodeNext',
    moduleResolution: 'NodeNext',
    target: 'ES2022',
    outDir: 'out',
    rootDir: 'src',
    types: ['node'],
    // As `tsc --init` writes it: the libraries' own declarations are not re-checked (3× faster).
    skipLibCheck: true,
  },
  include: ['src'],
};

export function createProject(programs: readonly Program[]): ReadmeProject {
  assertBuilt();
  const dir = mkdtempSync(join(tmpdir(), 'spillway-readme-'));
  symlinkSync(join(repoRoot, 'node_modules'), join(dir, 'node_modules'), 'dir');
  writeFileSync(join(dir, 'package.json'), `${JSON.stringify({ type: 'module', private: true }, null, 2)}\n`);
  writeFileSync(join(dir, 'tsconfig.json'), `${JSON.stringify(TSCONFIG, null, 2)}\n`);
  const src = join(dir, 'src');
  mkdirSync(src);
  for (const p of programs) writeFileSync(join(src, `${p.name}.ts`), p.source);
  return {
    dir,
    js: (name) => join(dir, 'out', `${name}.js`),
    remove: () => rmSync(dir, { recursive: true, force: true }),
  };
}

export interface Diagnostic {
  /** Program file name without extension. */
  program: string;
  /** Where in the README the line comes from. */
  at: string;
  message: string;
}

/**
 * Runs tsc in the project: `check` type-checks under the project's strict settings and emits;
 * `emitOnly` skips type checking (the compile test checks types) and only emits JavaScript.
 */
export async function compile(
  project: ReadmeProject,
  programs: readonly Program[],
  mode: 'check' | 'emitOnly',
): Promise<Diagnostic[]> {
  const tsc = join(repoRoot, 'node_modules', 'typescript', 'bin', 'tsc');
  const args = [tsc, '-p', project.dir, '--pretty', 'false'];
  if (mode === 'emitOnly') args.push('--noCheck');
  const output = await new Promise<string>((resolve) => {
    execFile(
      process.execPath,
      args,
      { cwd: project.dir, maxBuffer: 16 * 1024 * 1024 },
      (_error, stdout, stderr) => resolve(`${stdout}${stderr}`),
    );
  });
  const diagnostics: Diagnostic[] = [];
  for (const line of output.split('\n')) {
    const m = /^src\/([^(]+)\.ts\((\d+),(\d+)\): (.*)$/.exec(line.trim());
    if (m) {
      const p = programs.find((x) => x.name === m[1]);
      const at = p?.origin[Number(m[2]) - 1] ?? `${m[1]}.ts:${m[2]}`;
      diagnostics.push({ program: m[1]!, at: `${at}:${m[3]}`, message: m[4]! });
    } else if (line.trim() !== '') {
      diagnostics.push({ program: '', at: 'tsc', message: line.trim() });
    }
  }
  return diagnostics;
}

/** A project with `programs` compiled to JavaScript (types are the compile test's business). */
export async function compiledProject(programs: readonly Program[]): Promise<ReadmeProject> {
  const project = createProject(programs);
  const diagnostics = await compile(project, programs, 'emitOnly');
  if (diagnostics.length > 0) {
    project.remove();
    throw new Error(diagnostics.map((d) => `${d.at}: ${d.message}`).join('\n'));
  }
  return project;
}

/**
 * The programs import the built packages, as users do: refuse to test a dist/ older than its
 * sources (`npm test` builds first; a targeted run needs `npm run build`).
 */
export function assertBuilt(): void {
  const packages = join(repoRoot, 'packages');
  for (const name of readdirSync(packages)) {
    const src = join(packages, name, 'src');
    const dist = join(packages, name, 'dist');
    if (!existsSync(src)) continue;
    if (!existsSync(join(dist, 'index.js')))
      throw new Error(`packages/${name} is not built: run \`npm run build\` first`);
    // tsc --build leaves an output file alone when its text did not change; its build info is
    // rewritten on every build that saw a change.
    const info = join(packages, name, 'tsconfig.tsbuildinfo');
    const builtAt = Math.max(newestMtime(dist), existsSync(info) ? statSync(info).mtimeMs : 0);
    if (newestMtime(src) > builtAt)
      throw new Error(`packages/${name}/dist is older than its sources: run \`npm run build\` first`);
  }
}

function newestMtime(dir: string): number {
  let newest = 0;
  for (const entry of readdirSync(dir, { withFileTypes: true })) {
    const path = join(dir, entry.name);
    newest = Math.max(newest, entry.isDirectory() ? newestMtime(path) : statSync(path).mtimeMs);
  }
  return newest;
}
