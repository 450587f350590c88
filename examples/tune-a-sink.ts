// Tandem Bikes: pick the batch settings of the dock-status sink from measurements on our own
// PostgreSQL, not from a guess. The operations team wants every dock status durable within
// 250 ms (p99) at rush hour (about 3,000 events/s) and at night (a trickle), so the tuner tries
// its grid on both shapes and we open the sink with the winner.
//
//   npm run build && DATABASE_URL=postgres://postgres@127.0.0.1:5432/test node --import tsx examples/tune-a-sink.ts
//
// The same search from the command line:
//   spillway tune --to postgres://postgres@127.0.0.1:5432/test --p99 250 --shape steady,trickle --rate 3000
import { formatTune, tune } from '@spillway/tuner';

const url = process.env.DATABASE_URL ?? 'postgres://postgres@127.0.0.1:5432/test';

const outcome = await tune({
  store: { kind: 'postgres', mode: 'copy', url },
  p99Ms: 250,
  shapes: ['steady', 'trickle'],
  rate: 3000,
  onProgress: (p) =>
    process.stderr.write(`  trial ${p.done}/${p.total} ${p.cell.id}${p.error ? ' failed' : ''}\n`),
});

console.log(formatTune(outcome));
if (outcome.best) {
  const { maxRecords, maxAgeMs, idleMs } = outcome.best.settings;
  // These go straight into postgresSink({ pool, table: 'dock_status', ..., maxRecords, maxAgeMs, idleMs }).
  console.log(`\npostgresSink options: ${JSON.stringify({ maxRecords, maxAgeMs, idleMs })}`);
} else {
  process.exitCode = 3;
}
