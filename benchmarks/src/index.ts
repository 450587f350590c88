// Public surface of the benchmark suite, used by the CLI's `bench` and `tune` commands.
export {};
