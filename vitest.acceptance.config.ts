import { defineConfig } from 'vitest/config';

/** `npm run test:site-acceptance`: the site of arrays end to end (test/acceptance/), on an otherwise idle machine. */
export default defineConfig({
  test: {
    include: ['test/acceptance/**/*.test.ts'],
    testTimeout: 120_000,
    hookTimeout: 60_000,
    maxWorkers: 1,
  },
});
