// One benchmark cell in a process of its own: reads the cell's JSON spec from argv[2], prints the
// result as one JSON line on stdout. A fresh process per cell keeps heap, JIT state and RSS of one
// cell out of the next one's figures.
import { runCell } from './cell-run.js';
import type { CellSpec } from './cell-spec.js';

const arg = process.argv[2];
if (!arg) {
  process.stderr.write('usage: cell.js <cell spec as JSON>\n');
  process.exit(2);
}
try {
  const result = await runCell(JSON.parse(arg) as CellSpec);
  process.stdout.write(`${JSON.stringify(result)}\n`);
  process.exit(0);
} catch (error) {
  const e = error as { code?: string; message?: string };
  process.stdout.write(`${JSON.stringify({ error: e?.message ?? String(error), code: e?.code })}\n`);
  process.exit(1);
}
