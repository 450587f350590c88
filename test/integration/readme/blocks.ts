// Finds the TypeScript code blocks of README.md and packages/*/README.md, so that the tests can
// compile every one of them and run the main ones as programs.
//
// A block is named by an HTML comment on the line before its opening fence (invisible on a
// rendered page):
//
//   <!-- block: sink-in-twenty-lines -->            a program on its own
//   <!-- block: sink-as-a-stream (ends sink-in-twenty-lines) -->
//                                                   the named block with its last line replaced
//                                                   by this one (imports may sit anywhere at the
//                                                   top level of an ES module)
//
// A block without a comment is still compiled, under the name `<readme path>-<n>`.
import { existsSync, readdirSync, readFileSync } from 'node:fs';
import { join, relative } from 'node:path';
import { fileURLToPath } from 'node:url';

export const repoRoot = fileURLToPath(new URL('../../../', import.meta.url));

export interface ReadmeBlock {
  /** Stable name: from the block's comment, else derived from the file and position. */
  name: string;
  /** README path relative to the repository root. */
  file: string;
  /** 1-based line of the opening fence. */
  line: number;
  /** The block's own text. */
  code: string;
  /** For a block marked `(ends <base>)`: the base block's name. */
  ends?: string;
}

const MARKER = /^<!--\s*block:\s*([a-z0-9][a-z0-9-]*)\s*(?:\(ends\s+([a-z0-9][a-z0-9-]*)\))?\s*-->\s*$/;
const OPEN = /^```(ts|typescript)\s*$/;

/** README.md and every packages/<name>/README.md, relative to the repository root. */
export function readmeFiles(root = repoRoot): string[] {
  const files = ['README.md'];
  const packages = join(root, 'packages');
  for (const dir of readdirSync(packages).sort()) {
    if (existsSync(join(packages, dir, 'README.md'))) files.push(`packages/${dir}/README.md`);
  }
  return files;
}

/** The TypeScript blocks of one markdown text. A malformed marker or an unclosed fence throws. */
export function blocksOf(markdown: string, file: string): ReadmeBlock[] {
  const lines = markdown.split('\n');
  const blocks: ReadmeBlock[] = [];
  let unnamed = 0;
  for (let i = 0; i < lines.length; i++) {
    const text = lines[i]!;
    if (/^<!--\s*block\b/.test(text) && !MARKER.test(text))
      throw new Error(`${file}:${i + 1}: cannot read the block marker ${JSON.stringify(text)}`);
    if (!OPEN.test(text)) {
      // Skip over other fenced blocks, so a fence inside them is not taken for a TypeScript one.
      if (/^```/.test(text)) {
        const close = lines.findIndex((l, j) => j > i && /^```\s*$/.test(l));
        if (close < 0) throw new Error(`${file}:${i + 1}: the code block is never closed`);
        i = close;
      }
      continue;
    }
    const close = lines.findIndex((l, j) => j > i && /^```\s*$/.test(l));
    if (close < 0) throw new Error(`${file}:${i + 1}: the code block is never closed`);
    const marker = i > 0 ? MARKER.exec(lines[i - 1]!) : null;
    unnamed += marker ? 0 : 1;
    const name = marker?.[1] ?? `${file.replace(/[^A-Za-z0-9]+/g, '-').toLowerCase()}-${unnamed}`;
    const block: ReadmeBlock = { name, file, line: i + 1, code: `${lines.slice(i + 1, close).join('\n')}\n` };
    if (marker?.[2]) block.ends = marker[2];
    blocks.push(block);
    i = close;
  }
  return blocks;
}

/** Every TypeScript block of every README; names are checked to be unique. */
export function readmeBlocks(root = repoRoot): ReadmeBlock[] {
  const blocks = readmeFiles(root).flatMap((f) => blocksOf(readFileSync(join(root, f), 'utf8'), f));
  const seen = new Map<string, ReadmeBlock>();
  for (const b of blocks) {
    const before = seen.get(b.name);
    if (before) throw new Error(`two README blocks are named ${b.name}: ${where(before)} and ${where(b)}`);
    seen.set(b.name, b);
  }
  for (const b of blocks) {
    if (b.ends !== undefined && !seen.has(b.ends))
      throw new Error(`${where(b)}: the block ends "${b.ends}", which no README block is named`);
  }
  return blocks;
}

export function where(b: ReadmeBlock): string {
  return `${b.file}:${b.line}`;
}

/**
 * The program a block stands for: its own text, or for `(ends base)` the base program without its
 * last line, followed by this block.
 */
export function programOf(block: ReadmeBlock, all: readonly ReadmeBlock[]): string {
  if (block.ends === undefined) return block.code;
  const base = all.find((b) => b.name === block.ends)!;
  const baseLines = programOf(base, all).trimEnd().split('\n');
  return `${baseLines.slice(0, -1).join('\n')}\n${block.code}`;
}

/** The text of every fenced block of `lang` in one README (e.g. the SQL a program needs). */
export function fencedBlocks(file: string, lang: string, root = repoRoot): string[] {
  const lines = readFileSync(join(root, file), 'utf8').split('\n');
  const found: string[] = [];
  for (let i = 0; i < lines.length; i++) {
    if (!/^```/.test(lines[i]!)) continue;
    const close = lines.findIndex((l, j) => j > i && /^```\s*$/.test(l));
    if (close < 0) break;
    if (lines[i]!.slice(3).trim() === lang) found.push(`${lines.slice(i + 1, close).join('\n')}\n`);
    i = close;
  }
  return found;
}

/** Where a README block lives, for messages: `README.md:62 (sink-in-twenty-lines)`. */
export function label(b: ReadmeBlock): string {
  return `${where(b)} (${b.name})`;
}

export function relativeToRoot(path: string): string {
  return relative(repoRoot, path);
}
