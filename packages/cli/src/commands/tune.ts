import { type Command, InvalidArgumentError, Option } from 'commander';
import { SHAPE_NAMES, type ShapeName } from '../bench/shape-names.js';
import { positive, shapes } from './bench.js';

interface TuneCommandOptions {
  to: string;
  p99: number;
  shape: ShapeName[];
  rate: number;
  duration?: number;
  mode?: string;
  json?: boolean;
}

/** Registers `tune`: pick settings for a p99 target on your store. The tuner loads when it runs. */
export function registerTune(program: Command): void {
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
    .option(
      '--shape <list>',
      `shapes the setting must meet the target on: ${SHAPE_NAMES.join(', ')}`,
      shapes,
      ['steady', 'trickle'] as ShapeName[],
    )
    .option('--rate <n>', 'records/s of the steady, skewed and gap shapes', positive, 5000)
    .option('--duration <ms>', 'length of each trial, ms (default 1500; trickle and gap 3000)', positive)
    .addOption(new Option('--mode <mode>', 'PostgreSQL write mode').choices(['insert', 'copy', 'upsert']))
    .option('--json', 'print the full outcome as JSON')
    .action(async (o: TuneCommandOptions) => {
      const { formatTune, storeFromUrl, tune } = await import('@spillway/tuner');
      let store: ReturnType<typeof storeFromUrl>;
      try {
        store = storeFromUrl(o.to, o.mode);
      } catch (e) {
        throw new InvalidArgumentError(`--to: ${(e as Error).message}`);
      }
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
    });
}
