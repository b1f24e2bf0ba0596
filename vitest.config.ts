import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    include: ['test/**/*.test.ts'],
    testTimeout: 120_000,
    hookTimeout: 300_000,
    // Tests spawn worker pools and child processes; keep file-level parallelism modest on 2 cores.
    maxWorkers: 2,
  },
});
