import { defineConfig } from 'vitest/config';

export default defineConfig({
  test: {
    testTimeout: 30_000,
    hookTimeout: 30_000,
    // Integration tests bind real sockets on 127.0.0.1; two cores, so keep the pool small.
    maxWorkers: 2,
    projects: [
      {
        extends: true,
        test: { name: 'suite', sequence: { groupOrder: 0 }, include: ['test/**/*.test.ts'], exclude: ['**/node_modules/**', 'test/acceptance/**'] },
      },
      {
        // The site of arrays end to end (three edges rendering a scene in real time, a broker, the
        // site service): after the rest of the suite, alone, so the edges keep up with real time.
        extends: true,
        test: { name: 'acceptance', include: ['test/acceptance/**/*.test.ts'], testTimeout: 120_000, hookTimeout: 60_000, maxWorkers: 1, sequence: { groupOrder: 1 } },
      },
    ],
  },
});
