import type { Command } from 'commander';

/** Registers the `demo` command. (Placeholder until the command lands.) */
export function registerDemo(_program: Command): void {}
