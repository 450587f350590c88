import { fileURLToPath } from 'node:url';
import { defineConfig } from 'vitest/config';

// Tests import the workspace packages by name; point those names at the TypeScript sources so a
// test run needs no build, while `npm test` still builds first to type-check every package.
const pkg = (name: string) => fileURLToPath(new URL(`./packages/${name}/src/index.ts`, import.meta.url));
const src = (file: string) => fileURLToPath(new URL(`./packages/${file}`, import.meta.url));
// Sub-path entries first: an alias also matches every path below its name.
const alias = {
  '@spillway/core/kit': src('core/src/kit.ts'),
  '@spillway/core/testing': src('core/src/testing.ts'),
  '@spillway/core': pkg('core'),
  '@spillway/postgres': pkg('postgres'),
  '@spillway/redis': pkg('redis'),
  '@spillway/kafka': pkg('kafka'),
  '@spillway/ingest': pkg('ingest'),
  '@spillway/prometheus': pkg('prometheus'),
  '@spillway/otel': pkg('otel'),
  '@spillway/tuner': pkg('tuner'),
};

export default defineConfig({
  resolve: { alias },
  test: {
    projects: [
      {
        extends: true,
        test: {
          name: 'unit',
          sequence: { groupOrder: 0 },
          include: ['packages/*/test/**/*.test.ts'],
          testTimeout: 20_000,
        },
      },
      {
        extends: true,
        test: {
          name: 'integration',
          sequence: { groupOrder: 1 },
          include: ['test/**/*.test.ts'],
          globalSetup: ['test/harness/global-setup.ts'],
          testTimeout: 180_000,
          hookTimeout: 180_000,
          // Two cores: more workers only make the servers' own work slower.
          maxWorkers: 2,
        },
      },
    ],
  },
});
