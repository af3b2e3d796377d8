import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    include: ['test/**/*.test.ts'],
    testTimeout: 120_000,
    hookTimeout: 120_000,
    // Two cores: forks keep onnxruntime's native state per test file.
    pool: 'forks',
    maxWorkers: 2,
  },
});
