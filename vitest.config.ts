import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    include: ['tests/**/*.test.ts'],
    testTimeout: 120_000,
    hookTimeout: 240_000,
    // onnxruntime-node and nodejs-polars are native addons: forks isolate them more reliably than threads.
    pool: 'forks',
    maxWorkers: 2,
    // one temporary folder per run, removed at its end (tests/helpers/test-tmpdir.ts)
    globalSetup: ['tests/helpers/test-tmpdir.ts'],
  },
});
