// The PostgreSQL adapter against the raw driver with each side in a process of its own. In one
// process (`postgres.js`) the two sides alternate in one heap, and a pass is billed for whatever the
// garbage collector does in its window, part of it the other side's garbage; a run that holds more
// sinks measures each of them higher. Here every process runs one side only (`postgres.js --side`),
// with its own warm-up, and the processes of a pair run back to back, alternating which side goes
// first. Each pair gives a ratio of the two processes' medians; the figure is the median of the pairs.
// Run: npx tsc --build && node benchmarks/dist/adapters/postgres-isolated.js [--pairs 5]
//      [--modes insert,copy,upsert] [--sizes 10000] [--repeats 7] [--rows 100000]
//      SPILLWAY_PG_URL as for postgres.js.
// Nothing here asserts a time: it prints per-pair ratios, their median and range.
import { spawnSync } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { parseArgs } from 'node:util';
import { machineInfo } from '@spillway/tuner';
import { summary } from '../numbers.js';

const { values: flags } = parseArgs({
  options: {
    pairs: { type: 'string', default: '5' },
    modes: { type: 'string', default: 'insert,copy,upsert' },
    sizes: { type: 'string', default: '10000' },
    repeats: { type: 'string', default: '7' },
    rows: { type: 'string', default: '100000' },
  },
});
const PAIRS = Number(flags.pairs);
if (!Number.isSafeInteger(PAIRS) || PAIRS < 1)
  throw new TypeError(`Expected \`--pairs\` to be a positive integer, got \`${flags.pairs}\``);
const script = fileURLToPath(new URL('./postgres.js', import.meta.url));
type Side = 'raw' | 'sink';

/** One side in a process of its own: its samples (`raw:insert@10000`, `cpu:raw:insert@10000`, …). */
function runSide(side: Side): Record<string, number[]> {
  const args = [
    script,
    '--side',
    side,
    '--modes',
    flags.modes,
    '--sizes',
    flags.sizes,
    '--repeats',
    flags.repeats,
    '--rows',
    flags.rows,
    '--per-row',
    '0',
  ];
  const out = spawnSync(process.execPath, args, { encoding: 'utf8', maxBuffer: 16 << 20 });
  if (out.status !== 0) throw new Error(`postgres.js --side ${side} failed (${out.status}): ${out.stderr}`);
  const last = out.stdout
    .trim()
    .split('\n')
    .filter((l) => l.startsWith('{"samples"'))
    .at(-1);
  if (last === undefined) throw new Error(`postgres.js --side ${side} printed no samples`);
  return (JSON.parse(last) as { samples: Record<string, number[]> }).samples;
}

const cases = flags.modes.split(',').flatMap((m) => flags.sizes.split(',').map((s) => `${m}@${s}`));
// Per case: each pair's (sink median / raw median), for rows/s and for client CPU per row.
const rateRatios = new Map<string, number[]>(cases.map((c) => [c, []]));
const cpuRatios = new Map<string, number[]>(cases.map((c) => [c, []]));
const cpu = new Map<string, { raw: number[]; sink: number[] }>(cases.map((c) => [c, { raw: [], sink: [] }]));
const loads: number[] = [];
console.log(
  JSON.stringify({
    benchmark: 'postgres-adapter-isolated',
    machine: machineInfo(),
    pairs: PAIRS,
    modes: flags.modes,
    sizes: flags.sizes,
    repeats: Number(flags.repeats),
    rows: Number(flags.rows),
  }),
);
for (let p = 0; p < PAIRS; p++) {
  loads.push(machineInfo().loadAverage1m);
  const order: Side[] = p % 2 === 0 ? ['raw', 'sink'] : ['sink', 'raw'];
  const got: Partial<Record<Side, Record<string, number[]>>> = {};
  for (const side of order) got[side] = runSide(side);
  const line: string[] = [];
  for (const c of cases) {
    const med = (side: Side, prefix: string) => summary(got[side]![`${prefix}${side}:${c}`]!).median;
    const rate = med('sink', '') / med('raw', '');
    const cpuRatio = med('sink', 'cpu:') / med('raw', 'cpu:');
    rateRatios.get(c)!.push(rate);
    cpuRatios.get(c)!.push(cpuRatio);
    cpu.get(c)!.raw.push(med('raw', 'cpu:'));
    cpu.get(c)!.sink.push(med('sink', 'cpu:'));
    line.push(`${c} rows/s ${rate.toFixed(2)}, CPU ${cpuRatio.toFixed(2)}`);
  }
  console.log(
    `pair ${p + 1} (${order.join(' first, then ')}; load ${loads.at(-1)!.toFixed(2)}): ${line.join('; ')}`,
  );
}
console.log(
  `\nsink ÷ raw, each side in its own process: median of ${PAIRS} pairs (range); client CPU µs/row raw → sink (medians)`,
);
for (const c of cases) {
  const r = summary(rateRatios.get(c)!);
  const k = summary(cpuRatios.get(c)!);
  const { raw, sink } = cpu.get(c)!;
  console.log(
    `${c.padEnd(14)} rows/s ${r.median.toFixed(2)} (${r.min.toFixed(2)}–${r.max.toFixed(2)})   ` +
      `client CPU ${k.median.toFixed(2)} (${k.min.toFixed(2)}–${k.max.toFixed(2)})   ` +
      `${summary(raw).median.toFixed(2)} → ${summary(sink).median.toFixed(2)} µs/row`,
  );
}
console.log(
  JSON.stringify({
    loads,
    rateRatios: Object.fromEntries(rateRatios),
    cpuRatios: Object.fromEntries(cpuRatios),
    cpuUsPerRow: Object.fromEntries(cpu),
  }),
);
