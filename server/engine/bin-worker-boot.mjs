// Worker threads do not inherit the parent's tsx loader when it was registered programmatically
// (bin/nullsteer.mjs, vitest), so each bin worker registers it before loading its TypeScript.
import { register } from 'tsx/esm/api';

register();
await import('./bin-worker.ts');
