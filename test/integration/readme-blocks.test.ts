// Every TypeScript code block of README.md and packages/*/README.md compiles with tsc --strict
// (module NodeNext) against the built workspace packages, in a project laid out as a user's
// would be. A block marked `(ends <base>)` is compiled as the program it completes.
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { label, readmeBlocks } from './readme/blocks.js';
import { compile, createProject, type Diagnostic, program, type ReadmeProject } from './readme/project.js';

const blocks = readmeBlocks();
const programs = blocks.map((b) => program(b, blocks));
let project: ReadmeProject;
let diagnostics: Diagnostic[];

beforeAll(async () => {
  project = createProject(programs);
  diagnostics = await compile(project, programs, 'check');
});
afterAll(() => project?.remove());

describe('README code blocks', () => {
  it('include the main examples', () => {
    const names = blocks.map((b) => b.name);
    for (const name of [
      'sink-in-twenty-lines',
      'sink-as-a-stream',
      'sink-fed-by-pipe-into',
      'redis-availability',
      'ingest-a-partner-file',
      'bridge-into-postgres',
    ])
      expect(names).toContain(name);
  });

  it('leave the compiler nothing to say outside the blocks', () => {
    expect(diagnostics.filter((d) => d.program === '')).toEqual([]);
  });

  for (const block of blocks) {
    it(`${label(block)} compiles under --strict`, () => {
      const own = diagnostics.filter((d) => d.program === block.name).map((d) => `${d.at}: ${d.message}`);
      expect(own).toEqual([]);
    });
  }
});
