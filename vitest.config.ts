import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    include: ['shared-types/**/*.test.ts', 'services/**/*.test.ts', 'tests/**/*.test.ts'],
    exclude: ['**/node_modules/**', 'tests/bench/**'],
    testTimeout: 30_000,
    hookTimeout: 180_000,
    // Integration suites share one broker and one browser; run files one after another there.
    fileParallelism: true,
  },
});
