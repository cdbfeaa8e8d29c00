import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    include: ['tests/**/*.test.ts'],
    exclude: ['node_modules/**', 'dist/**', 'tests/bench/**'],
    testTimeout: 30_000,
    hookTimeout: 60_000,
    pool: 'forks',
    setupFiles: ['tests/setup.ts'],
    reporters: ['default'],
  },
});
