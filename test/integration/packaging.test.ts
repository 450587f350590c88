// The packages as a user gets them: `npm pack` every public package, install the tarballs into a
// temporary project outside the workspace next to the drivers' current majors (no --force, no
// --legacy-peer-deps), then use them there by name only: imports from ESM and from TypeScript
// (NodeNext, --strict), require() where Node allows it, and the installed `spillway` command.
// One install serves every check. Needs the built packages (`npm test` builds first) and the
// npm registry. The README's "Install" section describes what this file does.
import { type SpawnOptions, spawn } from 'node:child_process';
import { chmod, mkdir, mkdtemp, readdir, readFile, rm, stat, writeFile } from 'node:fs/promises';
import { tmpdir } from 'node:os';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { services, type TestSchema, withSchema } from '../harness/index.js';

const ROOT = fileURLToPath(new URL('../../', import.meta.url));
/** Every public package; each must install from its tarball and load by name. */
const PACKAGES = ['core', 'postgres', 'redis', 'kafka', 'ingest', 'prometheus', 'otel', 'tuner', 'cli'];
/**
 * What a user adds next to the tarballs: the drivers' current majors, and what a TypeScript user
 * needs, as the README's TypeScript paragraph lists it (the declarations of ioredis 6.1.0 import
 * `redis-errors`, which ships no types: `--strict` without `skipLibCheck` needs its @types).
 */
const NEXT_TO_THEM = [
  'ioredis@latest',
  'pg@8',
  'kafkajs@2',
  'typescript@5',
  '@types/node@20',
  '@types/pg@8',
  '@types/redis-errors@1',
];
/** A name each package's root must export (the CLI's root exports nothing: it is its binary). */
const EXPECTED_EXPORT: Record<string, string> = {
  '@spillway/core': 'Sink',
  '@spillway/postgres': 'postgresSink',
  '@spillway/redis': 'redisAdapter',
  '@spillway/kafka': 'KafkaBridge',
  '@spillway/ingest': 'ingestFile',
  '@spillway/prometheus': 'PrometheusExporter',
  '@spillway/otel': 'instrumentSinks',
  '@spillway/tuner': 'tune',
};

interface Ran {
  code: number | null;
  stdout: string;
  stderr: string;
}

function run(command: string, args: string[], options: SpawnOptions = {}): Promise<Ran> {
  return new Promise((resolve, reject) => {
    const child = spawn(command, args, { ...options, stdio: ['ignore', 'pipe', 'pipe'] });
    let stdout = '';
    let stderr = '';
    child.stdout?.setEncoding('utf8').on('data', (d: string) => (stdout += d));
    child.stderr?.setEncoding('utf8').on('data', (d: string) => (stderr += d));
    child.on('error', reject);
    child.on('close', (code) => resolve({ code, stdout, stderr }));
  });
}

const shown = (r: Ran) => `exit ${r.code}\n${r.stdout.slice(-3000)}\n${r.stderr.slice(-3000)}`;

let dir: string;
let app: string;
/** Every entry point of every package, by the name a user imports: roots and sub-path exports. */
let specifiers: string[];
let installSeconds: number;
let db: TestSchema;

beforeAll(async () => {
  // The embedded PostgreSQL of the demo runs as the `postgres` OS user when this runs as root: it
  // must be able to reach the installed binaries, so the project is not left 0700 (mkdtemp's mode).
  dir = await mkdtemp(join(tmpdir(), 'spillway-packaging-'));
  await chmod(dir, 0o755);
  app = join(dir, 'app');
  const tarballs = join(dir, 'tarballs');
  await mkdir(app);
  await mkdir(tarballs);

  specifiers = [];
  for (const p of PACKAGES) {
    const manifest = JSON.parse(await readFile(join(ROOT, 'packages', p, 'package.json'), 'utf8')) as {
      name: string;
      exports: Record<string, unknown>;
    };
    for (const key of Object.keys(manifest.exports))
      specifiers.push(key === '.' ? manifest.name : `${manifest.name}/${key.replace(/^\.\//, '')}`);
  }

  const packed = await run(
    'npm',
    ['pack', '--json', '--pack-destination', tarballs, ...PACKAGES.flatMap((p) => ['-w', `packages/${p}`])],
    { cwd: ROOT },
  );
  if (packed.code !== 0) throw new Error(`npm pack failed: ${shown(packed)}`);
  const files = (JSON.parse(packed.stdout) as Array<{ filename: string }>).map((t) =>
    join(tarballs, t.filename.replace(/^@/, '').replace('/', '-')),
  );

  await writeFile(
    join(app, 'package.json'),
    `${JSON.stringify({ name: 'tandem-packaging-check', private: true, type: 'module' }, null, 2)}\n`,
  );
  const started = performance.now();
  const installed = await run('npm', ['install', '--no-audit', '--no-fund', ...files, ...NEXT_TO_THEM], {
    cwd: app,
  });
  installSeconds = Math.round((performance.now() - started) / 100) / 10;
  if (installed.code !== 0) throw new Error(`npm install failed: ${shown(installed)}`);
  // A peer range that does not cover what is installed shows as an ERESOLVE warning (or error).
  expect(installed.stderr).not.toMatch(/ERESOLVE|peer dep/i);
  console.log(
    `packaging: npm install of ${files.length} tarballs and ${NEXT_TO_THEM.length} packages took ${installSeconds} s`,
  );

  db = await withSchema('packaging');
}, 600_000);

afterAll(async () => {
  await db?.drop();
  if (dir) await rm(dir, { recursive: true, force: true });
});

describe('the packed packages, installed into a project of their own', () => {
  it('install one copy of @spillway/core, and of ioredis@latest (the ranges of the CLI and the tuner take it)', async () => {
    // npm's dependency selectors (`npm query`): every installed copy, wherever it sits in the tree.
    const copies = async (name: string) => {
      const q = await run('npm', ['query', `#${name}`], { cwd: app });
      expect(q.code, shown(q)).toBe(0);
      return JSON.parse(q.stdout) as Array<{ version: string; path: string }>;
    };
    expect((await copies('@spillway/core')).map((c) => c.path)).toEqual([
      join(app, 'node_modules/@spillway/core'),
    ]);
    // A range that missed the current major would leave a second, nested ioredis.
    expect((await copies('ioredis')).map((c) => c.path)).toEqual([join(app, 'node_modules/ioredis')]);
  });

  it('ship a LICENSE, a README and the sources every source map points at', async () => {
    for (const p of PACKAGES) {
      const installed = join(app, 'node_modules', '@spillway', p);
      expect((await readFile(join(installed, 'LICENSE'), 'utf8')).split('\n')[2]).toBe(
        'Copyright (c) 2026 the Spillway authors',
      );
      expect(await readFile(join(installed, 'README.md'), 'utf8')).toContain(`npm install`);
      const maps = (await readdir(join(installed, 'dist'), { recursive: true })).filter((f) =>
        f.endsWith('.map'),
      );
      expect(maps.length).toBeGreaterThan(0);
      for (const map of maps) {
        const at = dirname(join(installed, 'dist', map));
        const { sources } = JSON.parse(await readFile(join(installed, 'dist', map), 'utf8')) as {
          sources: string[];
        };
        for (const source of sources)
          await expect(stat(join(at, source)), `${p}: ${map} → ${source}`).resolves.toBeTruthy();
      }
    }
  });

  it('import by name from an ESM file: every package and sub-path', async () => {
    const lines = specifiers.map(
      (s, i) =>
        `const m${i} = await import(${JSON.stringify(s)}); out[${JSON.stringify(s)}] = Object.keys(m${i});`,
    );
    await writeFile(
      join(app, 'imports.mjs'),
      `const out = {};\n${lines.join('\n')}\nprocess.stdout.write(JSON.stringify(out));\n`,
    );
    const r = await run(process.execPath, ['imports.mjs'], { cwd: app });
    expect(r.code, shown(r)).toBe(0);
    const exported = JSON.parse(r.stdout) as Record<string, string[]>;
    expect(Object.keys(exported).sort()).toEqual([...specifiers].sort());
    for (const [name, key] of Object.entries(EXPECTED_EXPORT)) expect(exported[name]).toContain(key);
    for (const s of specifiers.filter((s) => s.includes('/', '@spillway/'.length)))
      expect(exported[s]?.length, `${s} exports nothing`).toBeGreaterThan(0);
  });

  it('compile under tsc --strict with NodeNext resolution, with each package README example', async () => {
    const ts = join(app, 'ts');
    await mkdir(ts);
    const names = specifiers.map((s, i) => `import * as m${i} from ${JSON.stringify(s)};`);
    await writeFile(
      join(ts, 'imports.ts'),
      `${names.join('\n')}\nexport const all: readonly object[] = [${specifiers.map((_, i) => `m${i}`).join(', ')}];\n`,
    );
    // The example in each package README, as a user would paste it.
    let examples = 0;
    for (const p of PACKAGES) {
      const readme = await readFile(join(ROOT, 'packages', p, 'README.md'), 'utf8');
      const block = /```ts\n([\s\S]*?)```/.exec(readme)?.[1];
      if (!block) continue;
      examples++;
      await writeFile(join(ts, `readme-${p}.ts`), `${block}\nexport {};\n`);
    }
    expect(examples).toBeGreaterThanOrEqual(PACKAGES.length - 1); // the CLI's README shows commands only
    await writeFile(
      join(ts, 'tsconfig.json'),
      JSON.stringify({
        compilerOptions: {
          target: 'ES2022',
          module: 'NodeNext',
          moduleResolution: 'NodeNext',
          strict: true,
          noEmit: true,
          types: ['node'],
        },
        include: ['*.ts'],
      }),
    );
    const r = await run(process.execPath, [join(app, 'node_modules/typescript/bin/tsc'), '-p', ts], {
      cwd: app,
    });
    expect(r.code, shown(r)).toBe(0);
  });

  it('load through require() exactly where Node supports require() of ES modules', async () => {
    // Node.js documentation, "Modules: CommonJS modules — Loading ECMAScript modules using
    // require()": on by default from v20.19.0 and v22.12.0; earlier 20.x and 22.x throw ERR_REQUIRE_ESM.
    const [major = 0, minor = 0] = process.versions.node.split('.').map(Number);
    const supported = major > 22 || (major === 22 && minor >= 12) || (major === 20 && minor >= 19);
    const r = await run(
      process.execPath,
      ['-e', `const c = require('@spillway/core'); process.stdout.write(typeof c.Sink);`],
      { cwd: app },
    );
    if (supported) expect(r.stdout, shown(r)).toBe('function');
    else expect(r.stderr).toContain('ERR_REQUIRE_ESM');
  });
});

describe('the installed spillway command', () => {
  const trace = () => join(dir, `loaded-${Math.random().toString(36).slice(2)}.txt`);
  /** Runs the installed binary with a resolve hook that lists every module it loads. */
  async function spillway(
    args: string[],
    loaded?: string,
    env: NodeJS.ProcessEnv = process.env,
  ): Promise<Ran> {
    const hooks = join(dir, 'trace-hooks.mjs');
    await writeFile(
      hooks,
      `import { appendFileSync } from 'node:fs';
export async function resolve(specifier, context, next) {
  const r = await next(specifier, context);
  if (process.env.SPILLWAY_TRACE_FILE) appendFileSync(process.env.SPILLWAY_TRACE_FILE, r.url + '\\n');
  return r;
}\n`,
    );
    await writeFile(
      join(dir, 'trace.mjs'),
      `import { register } from 'node:module';\nregister(${JSON.stringify(`file://${hooks}`)});\n`,
    );
    const bin = join(app, 'node_modules/.bin/spillway');
    const pre = loaded ? ['--import', join(dir, 'trace.mjs')] : [];
    return run(process.execPath, [...pre, bin, ...args], {
      cwd: app,
      env: { ...env, ...(loaded ? { SPILLWAY_TRACE_FILE: loaded } : {}) },
    });
  }
  const heavy = (file: string) =>
    readFile(file, 'utf8').then((t) =>
      t.split('\n').filter((u) => /\/(vega|vega-lite)\/|@spillway\/tuner/.test(u)),
    );

  it('prints its help without loading the tuner or vega', async () => {
    const loaded = trace();
    const r = await spillway(['--help'], loaded);
    expect(r.code, shown(r)).toBe(0);
    for (const command of ['demo', 'ingest', 'bench', 'tune']) expect(r.stdout).toContain(command);
    expect(await readFile(loaded, 'utf8')).toContain('@spillway/cli/dist/bin.js');
    expect(await heavy(loaded)).toEqual([]);
  });

  it('ingests a small CSV into PostgreSQL without loading the tuner or vega', async () => {
    await db.pool.query(
      'CREATE TABLE service_records (record_id text PRIMARY KEY, dock_id text NOT NULL, bike_id int NOT NULL, serviced_at timestamptz NOT NULL)',
    );
    const csv = join(app, 'service-records.csv');
    await writeFile(
      csv,
      'record_id,dock_id,bike_id,serviced_at\n' +
        'SR-1,DK-0042,117,2024-05-01T08:12:00Z\n' +
        'SR-2,DK-0042,118,2024-05-01T08:40:00Z\n' +
        'SR-3,DK-0107,205,2024-05-01T09:05:00+02:00\n',
    );
    const url = new URL(services().pgUrl);
    url.searchParams.set('options', `-c search_path=${db.schema}`);
    const loaded = trace();
    const r = await spillway(
      [
        'ingest',
        csv,
        '--to',
        url.toString(),
        '--table',
        'service_records',
        '--columns',
        'record_id!,dock_id!,bike_id:integer!,serviced_at:timestamp!',
        '--progress',
        'none',
      ],
      loaded,
    );
    expect(r.code, shown(r)).toBe(0);
    const { rows } = await db.pool.query<{ n: string; bikes: string }>(
      'SELECT count(*) AS n, sum(bike_id) AS bikes FROM service_records',
    );
    expect(rows[0]).toEqual({ n: '3', bikes: String(117 + 118 + 205) });
    expect(await heavy(loaded)).toEqual([]);
  });

  it('tunes against the no-op store and picks a setting whose trials all landed', async () => {
    const r = await spillway([
      'tune',
      '--to',
      'noop:',
      '--p99',
      '200',
      '--shape',
      'steady',
      '--rate',
      '1000',
      '--duration',
      '300',
      '--json',
    ]);
    expect(r.code, shown(r)).toBe(0);
    const outcome = JSON.parse(r.stdout) as {
      best?: { settings: { maxRecords: number; maxAgeMs: number } };
      candidates: Array<{ results: { steady?: { offered: number; durable: number } } }>;
      failures: string[];
    };
    expect(outcome.failures).toEqual([]);
    expect(outcome.candidates.length).toBeGreaterThan(1);
    for (const c of outcome.candidates) {
      expect(c.results.steady?.offered).toBeGreaterThan(0);
      expect(c.results.steady?.durable).toBe(c.results.steady?.offered);
    }
    expect(outcome.best?.settings.maxRecords).toBeGreaterThan(0);
  });

  it('benchmarks into ./spillway-bench of the current directory, not into node_modules', async () => {
    const r = await spillway([
      'bench',
      '--stores',
      'noop',
      '--shapes',
      'steady',
      '--max-records',
      '100',
      '--max-age',
      '20',
      '--size-only',
      '',
      '--repeats',
      '1',
      '--duration',
      '300',
    ]);
    expect(r.code, shown(r)).toBe(0);
    const page = await readFile(join(app, 'spillway-bench', 'RESULTS.md'), 'utf8');
    expect(page).toContain('noop — steady');
    const chart = await readFile(join(app, 'spillway-bench', 'charts', 'noop-steady.svg'), 'utf8');
    expect(chart.startsWith('<svg')).toBe(true);
    const cli = join(app, 'node_modules', '@spillway', 'cli');
    const written = await run('find', [cli, '-newer', join(app, 'package-lock.json'), '-type', 'f']);
    expect(written.stdout.trim()).toBe('');
  });

  it('runs the demo for 5 s on the embedded PostgreSQL and finds every event in it', async () => {
    // Without the store variables the test run sets, the demo starts its embedded PostgreSQL.
    const env = { ...process.env };
    for (const name of ['SPILLWAY_POSTGRES_URL', 'SPILLWAY_REDIS_URL', 'SPILLWAY_KAFKA_BROKERS'])
      delete env[name];
    const r = await spillway(['demo', '--duration', '5', '--plain'], undefined, env);
    expect(r.code, shown(r)).toBe(0);
    expect(r.stdout).toMatch(/nothing lost: every store holds exactly what was produced/);
    expect(r.stdout).toMatch(/Result: OK/);
    expect(r.stdout).toMatch(/embedded PostgreSQL stopped/);
  });
});
