import type { Command } from 'commander';

/** Registers the `bench` command. (Placeholder until the command lands.) */
export function registerBench(_program: Command): void {}
