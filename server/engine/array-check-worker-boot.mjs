// Worker threads do not inherit the parent's tsx loader when it was registered programmatically
// (bin/nullsteer.mjs, vitest), so the array-check worker registers it before loading its TypeScript.
import { register } from 'tsx/esm/api';

register();
await import('./array-check-worker.ts');
