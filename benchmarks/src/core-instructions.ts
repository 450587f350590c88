/**
 * Instructions per record of the core-throughput variants, counted by valgrind: a figure the
 * machine's load does not move, for telling apart engine changes smaller than the noise of CPU
 * time on a shared machine. Each variant runs `core-throughput.js --variant <name>` twice under
 * `valgrind --tool=cachegrind --cache-sim=no` (node `--single-threaded`, so that the collector's
 * and the compiler's work land in the one counted thread), with two record counts; the difference
 * of the two totals over the difference of the counts is the cost of one record in the steady
 * state (start-up, module loading and warm-up cancel out).
 *
 * Instructions are not time: a cache miss or a stall costs cycles that no instruction count
 * shows, so CPU-time ratios (core-throughput.js) stay the figures the goals are read from.
 *
 *   node benchmarks/dist/core-instructions.js [--records 200000,600000] [--warmup 2000000] [--variants write,tryWrite]
 */
import { execFile } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { parseArgs } from 'node:util';

const { values: flags } = parseArgs({
  options: {
    records: { type: 'string', default: '200000,600000' },
    variants: { type: 'string', default: 'array,write,tryWrite,tryWriteMany,tryWriteManyMetas' },
    batch: { type: 'string', default: '1000' },
    // Records through the same sink before the counted ones (core-throughput.js's own default).
    warmup: { type: 'string', default: '2000000' },
  },
});
const [small, large] = String(flags.records).split(',').map(Number) as [number, number];
const variants = String(flags.variants).split(',');
const throughput = fileURLToPath(new URL('./core-throughput.js', import.meta.url));

/** Total instructions of one child process under valgrind. */
function instructions(variant: string, records: number): Promise<number> {
  const args = [
    '--tool=cachegrind',
    '--cache-sim=no',
    '--cachegrind-out-file=/dev/null',
    // The child compiles code at run time: valgrind must notice code written over code.
    '--smc-check=all-non-file',
    process.execPath,
    '--single-threaded',
    throughput,
    '--variant',
    variant,
    '--records',
    String(records),
    '--batch',
    String(flags.batch),
    '--warmup',
    String(flags.warmup),
  ];
  return new Promise((resolve, reject) => {
    execFile('valgrind', args, { maxBuffer: 1 << 24 }, (error, _stdout, stderr) => {
      if (error) return reject(new Error(`valgrind ${variant} ${records}: ${error.message}`));
      const m = /I\s+refs:\s+([\d,]+)/.exec(stderr);
      if (!m) return reject(new Error(`valgrind printed no instruction count for ${variant}`));
      resolve(Number(m[1]!.replace(/,/g, '')));
    });
  });
}

async function main(): Promise<void> {
  if (!(small > 0 && large > small))
    throw new TypeError(`--records must be two counts, the second larger, got ${flags.records}`);
  const perRecord: Record<string, number> = {};
  for (const v of variants) {
    // The two counts of one variant run side by side (two cores); variants one after the other.
    const [a, b] = await Promise.all([instructions(v, small), instructions(v, large)]);
    perRecord[v] = (b - a) / (large - small);
    console.log(`${v.padEnd(18)} ${perRecord[v]!.toFixed(0).padStart(6)} instructions per record`);
  }
  const limit = perRecord.array;
  if (limit !== undefined) {
    console.log('ratio to the array batcher (array ÷ variant, as the CPU ratios of core-throughput.js):');
    for (const v of variants)
      if (v !== 'array') console.log(`  ${v.padEnd(18)} ${(limit / perRecord[v]!).toFixed(2)}`);
  }
}

await main();
