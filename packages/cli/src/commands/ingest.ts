import type { Command } from 'commander';

/** Registers the `ingest` command. (Placeholder until the command lands.) */
export function registerIngest(_program: Command): void {}
