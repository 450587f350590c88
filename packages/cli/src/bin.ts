#!/usr/bin/env node
import { Command } from 'commander';
import { registerBench } from './commands/bench.js';
import { registerDemo } from './commands/demo.js';
import { registerIngest } from './commands/ingest.js';

const program = new Command()
  .name('spillway')
  .description('Batching sinks for streams into PostgreSQL, Redis and Kafka: demo, ingest, bench and tune.')
  .showHelpAfterError();

registerDemo(program);
registerIngest(program);
registerBench(program);

await program.parseAsync(process.argv);
