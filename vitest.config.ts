import os from 'node:os';
import path from 'node:path';
import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    include: ['test/**/*.test.ts'],
    testTimeout: 120_000,
    hookTimeout: 300_000,
    // Tests spawn worker pools and child processes; keep file-level parallelism modest on 2 cores.
    maxWorkers: 2,
    // Each test says whether it wants the first-pass cache (test/e2e/cache.test.ts does).
    // Autosave's recovery files go to a folder of the test run's own, never the user's state folder.
    env: { SCANFOLD_CACHE_DIR: 'off', SCANFOLD_STATE_DIR: path.join(os.tmpdir(), `scanfold-test-state-${process.pid}`) },
  },
});
