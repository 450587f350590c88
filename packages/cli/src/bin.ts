#!/usr/bin/env node
// Registering a command loads only what its flags need: each command loads its own work (the
// tuner, the grid and its charts, the demo's stores) when it runs.
import { Command } from 'commander';
import { registerBench } from './commands/bench.js';
import { registerDemo } from './commands/demo.js';
import { registerIngest } from './commands/ingest.js';
import { registerTune } from './commands/tune.js';

const program = new Command()
  .name('spillway')
  .description('Batching sinks for streams into PostgreSQL, Redis and Kafka: demo, ingest, bench and tune.')
  .showHelpAfterError();

registerDemo(program);
registerIngest(program);
registerBench(program);
registerTune(program);

await program.parseAsync(process.argv);
