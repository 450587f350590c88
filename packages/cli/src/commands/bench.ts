import {
  applyFlags,
  type BenchFlags,
  defaultPlan,
  formatTune,
  quickPlan,
  runSuite,
  SHAPES,
  type ShapeName,
  type StoreSpec,
  tune,
} from '@spillway/benchmarks';
import { type Command, InvalidArgumentError, Option } from 'commander';

const list = (v: string) =>
  v
    .split(',')
    .map((s) => s.trim())
    .filter(Boolean);
const numbers = (v: string) =>
  list(v).map((s) => {
    const n = Number(s);
    if (!Number.isFinite(n) || n < 0)
      throw new InvalidArgumentError(`expected comma-separated numbers >= 0, got "${v}"`);
    return n;
  });
const positive = (v: string) => {
  const n = Number(v);
  if (!Number.isFinite(n) || n <= 0) throw new InvalidArgumentError(`expected a number > 0, got "${v}"`);
  return n;
};
const shapes = (v: string) => {
  const out = list(v);
  for (const s of out)
    if (!SHAPES.includes(s as ShapeName))
      throw new InvalidArgumentError(`expected shapes among ${SHAPES.join(', ')}, got "${s}"`);
  return out as ShapeName[];
};

/**
 * The store behind a URL: postgres://…, redis://…, kafka://host:port[,host:port], or the
 * benchmark's own noop: and sim:<ms> stores (to try the tuner without a server).
 */
export function storeFromUrl(url: string, mode: string | undefined): StoreSpec {
  const scheme = url.split(':')[0]?.toLowerCase();
  switch (scheme) {
    case 'postgres':
    case 'postgresql':
      return { kind: 'postgres', url, mode: mode ?? 'insert' };
    case 'redis':
    case 'rediss':
      return { kind: 'redis', url };
    case 'kafka': {
      const brokers = list(url.replace(/^kafka:\/\//i, '').replace(/\/.*$/, ''));
      if (brokers.length === 0)
        throw new InvalidArgumentError(`expected kafka://host:port[,host:port], got "${url}"`);
      return { kind: 'kafka', brokers };
    }
    case 'noop':
      return { kind: 'noop' };
    case 'sim': {
      const ms = Number(url.slice(4).replace(/^\/\//, '') || '2');
      if (!Number.isFinite(ms) || ms < 0)
        throw new InvalidArgumentError(`expected sim:<latency ms>, got "${url}"`);
      return { kind: 'sim', latencyMs: ms, perRecordUs: 1 };
    }
    default:
      throw new InvalidArgumentError(
        `expected a postgres://, redis://, kafka://, noop: or sim: URL, got "${url}"`,
      );
  }
}

/** Registers `bench` (the benchmark grid) and `tune` (pick settings for a p99 target on your store). */
export function registerBench(program: Command): void {
  program
    .command('bench')
    .description(
      'Run the benchmark grid (each cell in a fresh process) and write RESULTS.md, results.json and SVG charts.',
    )
    .option('--quick', 'a small grid: two stores, two shapes, one run per cell')
    .option('--stores <list>', 'noop, sim[/<ms>], postgres[/insert|copy|upsert], redis, kafka', list)
    .option('--shapes <list>', `shapes: ${SHAPES.join(', ')}`, shapes)
    .option('--max-records <list>', 'maxRecords values', numbers)
    .option('--max-age <list>', 'maxAgeMs values', numbers)
    .option('--idle <list>', 'idleMs values (0 = off)', numbers)
    .option('--concurrency <list>', 'concurrency values', numbers)
    .option('--size-only <list>', 'maxRecords of the size-only baseline', numbers)
    .option('--repeats <n>', 'runs per cell', positive)
    .option('--rate <n>', 'records/s of the steady shape', positive)
    .option('--duration <ms>', 'length of every shape, ms', positive)
    .option('--full-grid', 'use the main grid on every shape')
    .option('--out <dir>', 'where results.json and charts/ go')
    .option('--markdown <file>', 'where the results page goes')
    .action(async (o: BenchFlags & { quick?: boolean; out?: string; markdown?: string }) => {
      const plan = applyFlags(o.quick ? quickPlan() : defaultPlan(), o);
      const started = Date.now();
      const { report, written } = await runSuite({
        plan,
        ...(o.out ? { outDir: o.out } : {}),
        ...(o.markdown ? { markdownPath: o.markdown } : {}),
        command: `spillway ${process.argv.slice(2).join(' ')}`,
        log: (line) => process.stderr.write(`${line}\n`),
        onProgress: (p) => {
          const what = p.error
            ? `FAILED ${p.error.split('\n')[0]}`
            : `${Math.round(p.result?.throughput ?? 0)}/s, p99 ${p.result?.latencyMs.p99.toFixed(1)} ms`;
          process.stderr.write(
            `[${p.done}/${p.total} ${Math.round((Date.now() - started) / 1000)}s] ${p.cell.id}: ${what}\n`,
          );
        },
      });
      for (const n of report.notes) process.stderr.write(`note: ${n}\n`);
      process.stdout.write(
        `wrote ${written.markdownPath}, ${written.jsonPath} and ${written.charts.length} chart(s)\n`,
      );
    });

  program
    .command('tune')
    .description(
      'Search batch settings against your own store and print the fastest one whose p99 meets a target.',
    )
    .requiredOption(
      '--to <url>',
      'the store: postgres://…, redis://…, kafka://host:port, or sim:<ms> / noop: to try it out',
    )
    .requiredOption('--p99 <ms>', 'p99 accept → durable target, ms', positive)
    .option('--shape <list>', `shapes the setting must meet the target on: ${SHAPES.join(', ')}`, shapes, [
      'steady',
      'trickle',
    ] as ShapeName[])
    .option('--rate <n>', 'records/s of the steady, skewed and gap shapes', positive, 5000)
    .option('--duration <ms>', 'length of each trial, ms (default 1500; trickle and gap 3000)', positive)
    .addOption(new Option('--mode <mode>', 'PostgreSQL write mode').choices(['insert', 'copy', 'upsert']))
    .option('--json', 'print the full outcome as JSON')
    .action(
      async (o: {
        to: string;
        p99: number;
        shape: ShapeName[];
        rate: number;
        duration?: number;
        mode?: string;
        json?: boolean;
      }) => {
        const store = storeFromUrl(o.to, o.mode);
        process.stderr.write(
          `Trying settings on ${o.to.replace(/\/\/[^@/]*@/, '//***@')} (each trial in a fresh process) …\n`,
        );
        const outcome = await tune({
          store,
          p99Ms: o.p99,
          shapes: o.shape,
          rate: o.rate,
          ...(o.duration ? { durationMs: o.duration } : {}),
          onProgress: (p) => {
            const s = p.cell.settings;
            const what = p.error
              ? 'failed'
              : `${Math.round(p.result?.throughput ?? 0)}/s, p99 ${p.result?.latencyWithStuckMs.p99.toFixed(1)} ms`;
            process.stderr.write(
              `  [${p.done}/${p.total}] ${p.cell.shape.shape} maxRecords ${s.maxRecords} maxAgeMs ${s.maxAgeMs}: ${what}\n`,
            );
          },
        });
        process.stdout.write(o.json ? `${JSON.stringify(outcome, null, 1)}\n` : `${formatTune(outcome)}\n`);
        if (!outcome.best) process.exitCode = 3;
      },
    );
}
